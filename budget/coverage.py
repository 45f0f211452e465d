"""Coverage factors and degrees of freedom: the Student-t link k_p = t_p(ν) both ways.

A calibration certificate that states an expanded uncertainty U with a coverage factor k "for a
coverage probability of p" has, by JCGM 100 G.4–G.6 (Table G.2), taken k = t_p(ν_eff) for some
effective degrees of freedom. Dividing U by k recovers u, but keeping ν = ∞ afterwards discards
what k says about the reliability of u: a budget dominated by that input would then report
U = 1.96·u, smaller than the certificate's own U. So ν is recovered from k:

* ν solves t_p(ν) = k, the two-sided Student-t quantile, with ``scipy.special.stdtridf``
  (the inverse of the t distribution function in its degrees of freedom); a fractional ν is kept.
  Example: k = 2.87 at p = 95 % gives ν = 3.7 (t_0.975(4) = 2.78, t_0.975(3) = 3.18).
* k within :data:`K_ROUNDING` of the normal quantile z_p (or below it by at most that much) gives
  ν = ∞: certificates state k to two decimals, and t_p(ν) lies that close to z_p only for ν of
  several hundred, where ν no longer changes any coverage factor at the digits reported.
* k clearly below z_p cannot come from any t distribution at that p (t_p(ν) > z_p for every
  finite ν): refused, since the stated p must then be another one (k = 1.65 is a 90 % normal).
* k < 1 is refused in any case: no certificate's expanded uncertainty is smaller than its u.

JCGM 101 §6.4.9.7 then samples such an input as a scaled and shifted t with ν degrees of freedom
and scale U/k, which :mod:`budget.propagate.mcm` does for every normal input with finite ν.

:func:`coverage_probability_of` goes the other way, for a fixed k: p = P(|t_ν| ≤ k).
"""

from __future__ import annotations

import math

from scipy import special

from .errors import BudgetError

__all__ = ["dof_from_coverage_factor", "coverage_probability_of", "describe_inference",
           "K_ROUNDING", "DEFAULT_CERTIFICATE_PROBABILITY"]

#: half a unit in the second decimal, the digit to which certificates state k
K_ROUNDING = 0.005
#: coverage probability assumed for a stated k when none is given (JCGM 100 §6.2.2, EA-4/02 §5)
DEFAULT_CERTIFICATE_PROBABILITY = 0.95


def dof_from_coverage_factor(k: float, p: float = DEFAULT_CERTIFICATE_PROBABILITY) -> float:
    """Degrees of freedom ν implied by a coverage factor k stated for coverage probability p.

    Parameters
    ----------
    k : float
        The stated coverage factor (dimensionless), at least 1.
    p : float
        The coverage probability k was stated for, in (0, 1). Default 0.95.

    Returns
    -------
    float
        ν with t_p(ν) = k (fractional in general); the nearest integer n when t_p(n) equals k
        to within :data:`K_ROUNDING` (k stated rounded from an integer ν); ``math.inf`` when k
        is the normal quantile z_p to within :data:`K_ROUNDING`.

    Raises
    ------
    BudgetError
        k not finite or below 1 (field ``coverage_factor``); p outside (0, 1) (field
        ``coverage_probability``); k below z_p − :data:`K_ROUNDING`, which no t distribution
        gives at p (field ``coverage_factor``). The caller locates the error at its file, row
        and key.
    """
    if not (isinstance(k, (int, float)) and math.isfinite(k)) or k < 1:
        raise BudgetError(f"a coverage factor below 1 would make the expanded uncertainty "
                          f"smaller than the standard uncertainty; got k = {k!r}",
                          field="coverage_factor")
    if not (isinstance(p, (int, float)) and 0 < p < 1):
        raise BudgetError(f"must lie in (0, 1); got {p!r}", field="coverage_probability")
    q = (1 + p) / 2
    z = float(special.ndtri(q))
    if k <= z + K_ROUNDING:
        if k < z - K_ROUNDING:
            raise BudgetError(
                f"k = {k:g} is below the normal quantile {z:.3f} for p = {100 * p:g} %, so no "
                "t distribution gives it; state the coverage_probability the certificate gives "
                f"for k = {k:g} (a normal gives {coverage_probability_of(k, math.inf):.4g})",
                field="coverage_factor")
        return math.inf
    nu = float(special.stdtridf(q, k))
    # A certificate states k rounded (to K_ROUNDING) from t_p of an integer ν, e.g. 2.87 for
    # t_95.45(4) = 2.869: the exact inverse (3.998) then truncates a whole degree of freedom
    # away (JCGM 100 G.6.4). The nearest integer is taken when its t_p lies within k's rounding.
    n = round(nu)
    if n >= 1 and abs(float(special.stdtrit(n, q)) - k) <= K_ROUNDING:
        return float(n)
    return nu


def coverage_probability_of(k: float, dof: float) -> float:
    """Coverage probability P(|t_ν| ≤ k) that a fixed coverage factor gives at ν.

    Parameters
    ----------
    k : float
        Coverage factor, > 0.
    dof : float
        Degrees of freedom ν (> 0; ``inf`` for the normal distribution).

    Returns
    -------
    float
        2·F_ν(k) − 1 with F_ν the Student-t distribution function (JCGM 100 G.3); e.g.
        k = 2, ν = 3 gives 0.861 and k = 2, ν = ∞ gives 0.9545.
    """
    if math.isinf(dof) or dof > 1e7:
        return float(2 * special.ndtr(k) - 1)
    return float(2 * special.stdtr(dof, k) - 1)


def describe_inference(k: float, p: float, dof: float) -> str:
    """Provenance text, e.g. ``"ν = 3.7 inferred from k = 2.87 at 95 % (JCGM 100 G.4–G.6)"``."""
    pct = f"{100 * p:g} %"
    if math.isinf(dof):
        return (f"ν = ∞ inferred from k = {k:g} at {pct}: k is the normal quantile to the "
                "digits stated (JCGM 100 G.4–G.6)")
    if dof == int(dof):
        t = float(special.stdtrit(dof, (1 + p) / 2))
        return (f"ν = {dof:.0f} inferred from k = {k:g} at {pct}: t_p({dof:.0f}) = {t:.4f}, "
                "which k states to its digits (JCGM 100 G.4–G.6, Table G.2)")
    shown = f"{dof:.1f}" if dof < 100 else f"{dof:.0f}"
    return (f"ν = {shown} inferred from k = {k:g} at {pct}: the ν for which t_p(ν) = k "
            "(JCGM 100 G.4–G.6, Table G.2)")
