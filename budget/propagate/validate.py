"""Comparing the linear result with the Monte Carlo result (JCGM 101 §8).

The numerical tolerance δ of a value u (§7.9.2): write u as c × 10^l with c an integer of
``ndig`` digits; then δ = ½ × 10^l. The linear result is validated when both
d_low = |y − U_p − y_low| and d_high = |y + U_p − y_high| are at most δ (§8.2), with δ taken
from the linear u_c(y).

The Monte Carlo ends y_low, y_high carry their own numerical standard uncertainties s_low,
s_high (from batches, :class:`budget.propagate.mcm.Accuracy`), and so do d_low and d_high. The
verdict is three-valued (this tool's rule; JCGM 101 §8 compares d with δ as if d were exact):

* ``"validated"``: d_low + 2·s_low ≤ δ and d_high + 2·s_high ≤ δ;
* ``"not_validated"``: d_low − 2·s_low > δ or d_high − 2·s_high > δ;
* ``"inconclusive"``: otherwise — some |d − δ| ≤ 2·s, the Monte Carlo is not accurate enough to
  say on which side of δ that end lies; also when s is unknown (fewer than two batches).

The factor 2 (:data:`VERDICT_FACTOR`) is the one JCGM 101 §7.9.4 applies to the standard
deviation of the batch results. With s = 0 the rule is the plain §8.2 comparison.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["numerical_tolerance", "Validation", "compare_lpu_mcm", "VERDICTS", "VERDICT_FACTOR"]

VERDICTS = ("validated", "not_validated", "inconclusive")
VERDICT_FACTOR = 2.0  # |d − δ| within 2·s of the Monte Carlo end: inconclusive (docstring)


def numerical_tolerance(u: float, ndig: int = 2) -> float:
    """δ = ½ × 10^l where u = c × 10^l and c has ``ndig`` significant digits (JCGM 101 §7.9.2).

    Parameters
    ----------
    u : float
        Standard uncertainty, in the output's unit.
    ndig : int
        Significant digits regarded as meaningful in ``u``. Default 2.

    Returns
    -------
    float
        δ in the unit of ``u``; 0 when ``u`` is 0 or not finite (nothing can then be validated).
    """
    if not (u > 0 and math.isfinite(u)):
        return 0.0
    l_exp = math.floor(math.log10(u)) - ndig + 1
    # guard against u just below a power of ten being rounded up by floating point
    if round(u / 10 ** l_exp) >= 10 ** ndig:
        l_exp += 1
    return 0.5 * 10.0 ** l_exp


@dataclass(frozen=True)
class Validation:
    """Outcome of the §8 comparison for one output."""

    tolerance: float
    d_low: float
    d_high: float
    validated: bool
    #: "validated", "not_validated" or "inconclusive" (module docstring)
    verdict: str = ""

    def __post_init__(self) -> None:
        if not self.verdict:
            object.__setattr__(self, "verdict",
                               "validated" if self.validated else "not_validated")

    def to_dict(self) -> dict:
        """JSON-ready fields (δ, d_low, d_high in the output's unit)."""
        return {"tolerance": self.tolerance, "d_low": self.d_low, "d_high": self.d_high,
                "validated": self.validated, "verdict": self.verdict}


def compare_lpu_mcm(y: float, expanded: float, u: float, low: float, high: float,
                    ndig: int = 2, s_low: float = 0.0, s_high: float = 0.0) -> Validation:
    """Compare the interval y ± U_p with the Monte Carlo interval [low, high] (JCGM 101 §8).

    Parameters
    ----------
    y, expanded, u : float
        Estimate, expanded uncertainty U_p and standard uncertainty of the linear result, all
        in the output's unit.
    low, high : float
        Ends of the Monte Carlo coverage interval, same unit.
    ndig : int
        Significant digits of ``u`` behind the tolerance δ. Default 2.
    s_low, s_high : float
        Numerical standard uncertainties of ``low`` and ``high`` (same unit); NaN when not
        known. Default 0 (the ends taken as exact: the plain §8.2 comparison).

    Returns
    -------
    Validation
        δ, d_low = |y − U_p − low|, d_high = |y + U_p − high| and the verdict of the module
        docstring (``validated`` is True only for ``"validated"``).
    """
    delta = numerical_tolerance(u, ndig)
    d_low = abs(y - expanded - low)
    d_high = abs(y + expanded - high)
    k = VERDICT_FACTOR
    if not (math.isfinite(s_low) and math.isfinite(s_high)):
        verdict = "inconclusive"
    elif d_low - k * s_low > delta or d_high - k * s_high > delta:
        verdict = "not_validated"
    elif d_low + k * s_low <= delta and d_high + k * s_high <= delta:
        verdict = "validated"
    else:
        verdict = "inconclusive"
    return Validation(tolerance=delta, d_low=d_low, d_high=d_high,
                      validated=verdict == "validated", verdict=verdict)
