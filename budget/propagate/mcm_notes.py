"""The notes and warning text that say how accurate a Monte Carlo run is (JCGM 101 §7.9, §8).

Kept apart from :mod:`budget.engine` so that the wording of the numerical-accuracy notes is in
one place: what a fixed number of trials does not give (stabilisation), the accuracy its batches
show, the stop tolerance actually used, the interval the stop did not test, and a Monte Carlo u
far from the linear u_c.
"""

from __future__ import annotations

import math

from .mcm import McmResult
from .validate import VERDICT_FACTOR, Validation, numerical_tolerance

__all__ = ["mc_accuracy_notes", "inconclusive_message", "U_RATIO_NOTE"]

#: a Monte Carlo u more than this factor away from u_c (either way) gets a note
U_RATIO_NOTE = 1.5

_OTHER = {"symmetric": "shortest", "shortest": "symmetric"}


def _g(x: float) -> str:
    return f"{x:.2g}"


def mc_accuracy_notes(m, r: McmResult, interval: str, s_lo: float, s_hi: float,
                      ndig: int = 2) -> list[str]:
    """Notes on the numerical accuracy of the Monte Carlo result ``r`` of measurand ``m``.

    Parameters
    ----------
    m : budget.result.Measurand
        The linear result (its u_c and terms).
    r : McmResult
    interval : {"symmetric", "shortest"}
        The reported interval.
    s_lo, s_hi : float
        Numerical standard uncertainties of the reported interval's ends (NaN: not known).
    ndig : int
        Significant digits behind δ. Default 2.
    """
    out = []
    name = m.name
    if not r.adaptive:
        if r.accuracy is None:
            out.append(f"{name}: a fixed number of trials ({r.trials:,}); the Monte Carlo "
                       "results are not stabilised (the adaptive procedure of JCGM 101 §7.9 was "
                       "not used) and too few trials to estimate their numerical accuracy "
                       "(fewer than two batches of ⌈10/(1 − p)⌉ trials), so the JCGM 101 §8 "
                       "verdict is inconclusive")
        else:
            out.append(f"{name}: a fixed number of trials ({r.trials:,}); the Monte Carlo "
                       "results are not stabilised (the adaptive procedure of JCGM 101 §7.9 was "
                       f"not used); their numerical standard uncertainties from "
                       f"{r.accuracy.batches} batches (JCGM 101 §7.9.4): interval ends "
                       f"s_low = {_g(s_lo)}, s_high = {_g(s_hi)}, u {_g(r.accuracy.standard_uncertainty)}"
                       f", y {_g(r.accuracy.value)}")
    else:
        d_mc = numerical_tolerance(r.standard_uncertainty, ndig) / 5
        d_lin = numerical_tolerance(m.standard_uncertainty, ndig) / 5
        if r.stop_tolerance and d_lin < d_mc and math.isclose(r.stop_tolerance, d_lin):
            out.append(f"{name}: the adaptive stop used δ/5 = {_g(d_lin)} from the linear u_c "
                       f"(JCGM 101 §8.1), stricter than δ/5 = {_g(d_mc)} from the Monte Carlo u "
                       "(§7.9.2): the §8 comparison is judged by the former")
        if r.accuracy is not None:
            other = _OTHER.get(interval, "shortest")
            a, b = r.accuracy.interval(other)
            out.append(f"{name}: the adaptive stop tested the ends of the {interval} interval "
                       f"(the one reported); the {other} interval in the record was not "
                       f"stabilised (numerical standard uncertainties of its ends {_g(a)}, "
                       f"{_g(b)})")
    uc, umc = m.standard_uncertainty, r.standard_uncertainty
    if uc > 0 and umc > 0 and math.isfinite(umc) and max(umc / uc, uc / umc) > U_RATIO_NOTE:
        finite = [t.name for t in m.terms if math.isfinite(t.dof) and t.sensitivity != 0.0
                  and t.distribution == "normal"]
        why = (f"; inputs with finite ν ({', '.join(finite)}) are sampled from t_ν, whose "
               "variance ν/(ν − 2)·u² exceeds the u² the linear u_c uses (JCGM 101 §6.4.9), "
               "and the coverage interval, not u, is the comparable result"
               if finite else "")
        out.append(f"{name}: the Monte Carlo u = {_g(umc)} is {umc / uc:.2g} × the linear "
                   f"u_c = {_g(uc)}{why}")
    return out


def inconclusive_message(name: str, v: Validation, s_lo: float, s_hi: float,
                         adaptive: bool, stabilised: bool = True) -> str:
    """The ``monte_carlo.inconclusive`` warning: the §8 verdict cannot be decided."""
    k = f"{VERDICT_FACTOR:g}"
    if not (math.isfinite(s_lo) and math.isfinite(s_hi)):
        why = "the numerical accuracy of the Monte Carlo interval is not known"
    else:
        why = (f"|d − δ| lies within {k}·s of the Monte Carlo's own numerical uncertainty "
               f"(s_low = {_g(s_lo)}, s_high = {_g(s_hi)})")
    if adaptive and stabilised:
        todo = ("a borderline case: treat the linear result as not validated, or state the "
                "Monte Carlo interval")
    elif adaptive:
        todo = ("the procedure stopped at max_trials before stabilising: raise max_trials, or "
                "use sampling = \"sobol\"")
    else:
        todo = "run the adaptive procedure (trials = \"adaptive\") or more trials"
    return (f"{name}: the JCGM 101 §8 comparison is inconclusive (d_low = {_g(v.d_low)}, "
            f"d_high = {_g(v.d_high)}, δ = {_g(v.tolerance)}): {why}; the linear result is "
            f"neither validated nor shown not to be — {todo}")
