"""Comparing the linear result with the Monte Carlo result (JCGM 101 §8).

The numerical tolerance δ of a value u (§7.9.2): write u as c × 10^l with c an integer of
``ndig`` digits; then δ = ½ × 10^l. The linear result is validated when both
d_low = |y − U_p − y_low| and d_high = |y + U_p − y_high| are at most δ (§8.2), with δ taken
from the linear u_c(y).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["numerical_tolerance", "Validation", "compare_lpu_mcm"]


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

    def to_dict(self) -> dict:
        """JSON-ready fields (δ, d_low, d_high in the output's unit)."""
        return {"tolerance": self.tolerance, "d_low": self.d_low, "d_high": self.d_high,
                "validated": self.validated}


def compare_lpu_mcm(y: float, expanded: float, u: float, low: float, high: float,
                    ndig: int = 2) -> Validation:
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

    Returns
    -------
    Validation
        δ, d_low = |y − U_p − low|, d_high = |y + U_p − high| and whether both are ≤ δ.
    """
    delta = numerical_tolerance(u, ndig)
    d_low = abs(y - expanded - low)
    d_high = abs(y + expanded - high)
    return Validation(tolerance=delta, d_low=d_low, d_high=d_high,
                      validated=bool(d_low <= delta and d_high <= delta))
