"""Type A uncertainty of the mean of correlated cycle differences, with a white-noise verdict.

Procedure (all numbers in the reading's unit unless stated)
----------------------------------------------------------
1. **White-noise standard error.** u_w² = s²·g, with g from the exact white-noise model of the
   differences (:func:`budget.stats.onoff.white_model`): unbiased under white reading noise
   although neighbouring differences share an off segment; ν_w by Satterthwaite.
2. **Allan deviation** (overlapping, octave factors m) of the differences. White noise predicts
   AVAR(m) = S²·A(m), with A(m) from the model autocovariance (:func:`avar_model`).
3. **Verdict.** Allan ratio test at the longest octave m_L ≤ n/4: R = AVAR(m_L)/(Ŝ²·A(m_L)),
   with Ŝ² = AVAR(1)/A(1) taken from the shortest averaging (which slow noise barely touches).
   Under white noise R is close to an F(ν_L, ν_1) variable, ν the SP 1065 white-noise edf of
   the overlapping Allan variance at m_L and at 1; the record is called white when
   P(F ≥ R) ≥ ``level`` (default 0.05). Needs n ≥ 8 differences; fewer are "not testable" and
   keep the white-noise standard error with a note. The test looks where flicker (1/f) noise
   or a wandering current shows most (the longest averaging), but no test on one record can
   see noise that only matters at the full record length: a flicker part that raises the
   variance of the mean by less than about a factor 2 is often passed as white.
4. **Widening** when not white: the largest of
   * u_w;
   * the autocorrelation correction u² = (s²/n)·[1 + 2Σ(1 − k/n)r_k] (Zhang 2006; Witt 2007;
     truncation rule in :mod:`budget.stats.autocorr`), ν = n_eff − 1;
   * the Allan floor: a weighted non-negative fit AVAR(m) ≈ a·A(m) + b (white part plus a flat
     flicker floor b) over the octaves up to m_L, extrapolated to the whole record,
     u² = a·Var₁(d̄) + b. For white noise this is the standard error; for flicker noise it is
     the convention that the Allan deviation at τ = T measures the uncertainty of a mean over
     T (the variance of a mean of pure 1/f noise is not defined without a low-frequency
     cutoff). ν by Welch–Satterthwaite from ν_w for the white part and the SP 1065 flicker
     edf of the Allan variance at m_L for the floor, at most ν_w.
   The diagnostics say which one set the uncertainty.
5. **Proportionate widening.** The widening of step 4 (u_full, ν_full) is applied in
   proportion to the evidence against white noise, measured in decades of the test's p-value
   below its level: w = min(1, log₁₀(level/p)) (0 when the record passes),
   u² = (1 − w)·u_w² + w·u_full², ν by Welch–Satterthwaite from the two parts
   ((1 − w)·u_w² with ν_w, w·u_full² with ν_full). A record just past the threshold keeps
   about u_w; one whose p is ten times below the level (p ≤ level/10) gets the full widening
   of step 4. Why: under white noise p is uniform, so a chance rejection has
   E[w | p < level] = ∫₀¹ 10⁻ˣ dx = 0.9/ln 10 = 0.391 and the full widening falls on
   level/10 = 0.5 % of white records instead of on every rejected one (5 %); a record dominated
   by correlated noise has p many decades below the level (median about 10⁻⁸ in the tests'
   flicker case) and keeps the full widening, hence its coverage.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import optimize, special

from ..errors import ComputationError
from . import allan, autocorr
from .onoff import WhiteModel, avar_model

__all__ = ["Verdict", "AllanFit", "TypeA", "analyse", "planning", "evidence_weight",
           "FULL_DECADES"]

MIN_TESTABLE = 8
#: decades of p below the level at which the full widening applies (step 5)
FULL_DECADES = 1.0


@dataclass(frozen=True)
class Verdict:
    """Outcome of the Allan ratio test for white noise."""

    testable: bool
    white: bool
    statistic: float | None
    m: int | None
    edf: float | None
    edf_reference: float | None
    p_value: float | None
    level: float
    text: str

    def to_dict(self) -> dict[str, Any]:
        return {"testable": self.testable, "white": self.white, "test": "Allan ratio (F)",
                "statistic": self.statistic, "m": self.m, "edf": self.edf,
                "edf_reference": self.edf_reference, "p_value": self.p_value,
                "level": self.level, "text": self.text}


@dataclass(frozen=True)
class AllanFit:
    """AVAR(m) ≈ a·A(m) + b over octaves ``m``; ``u`` the extrapolated uncertainty of d̄."""

    a: float
    b: float
    m: np.ndarray
    u: float
    dof: float

    def to_dict(self) -> dict[str, Any]:
        return {"white_scale_S2": self.a, "floor_avar": self.b, "floor_adev": math.sqrt(self.b),
                "m": [int(v) for v in self.m], "u": self.u, "dof": self.dof}


@dataclass(frozen=True)
class TypeA:
    """Everything the Type A evaluation of the cycle differences found."""

    n: int
    mean: float
    s: float
    u_naive: float
    u_white: float
    dof_white: float
    white_factor: float
    noise_density: float
    r1: float | None
    r1_model: float
    curve: allan.AllanCurve
    avar_white: np.ndarray
    verdict: Verdict
    acorr: autocorr.EffectiveNumber | None
    u_acorr: float | None
    fit: AllanFit | None
    method: str
    u: float
    dof: float
    weight: float = 0.0
    u_full: float | None = None
    dof_full: float | None = None

    @property
    def widened(self) -> bool:
        """True when u exceeds the white-noise standard error (step 5 applied a widening)."""
        return self.method != "white"

    def widening_to_dict(self) -> dict[str, Any]:
        return {"rule": "w = min(1, log10(level/p)); u^2 = (1 - w)*u_white^2 + w*u_full^2",
                "weight": self.weight, "u_full": self.u_full, "dof_full": self.dof_full,
                "full_decades": FULL_DECADES, "factor": self.u / self.u_white}


def evidence_weight(p: float | None, level: float) -> float:
    """Weight w of the full widening, from the white-noise test's p-value (step 5).

    0 when the record passes (p ≥ level, or no p), 1 when p ≤ level·10^(−FULL_DECADES),
    log-linear between.
    """
    if p is None or not p < level:
        return 0.0
    if p <= 0.0:
        return 1.0
    return float(min(1.0, math.log10(level / p) / FULL_DECADES))


def _allan_fit(curve: allan.AllanCurve, model: WhiteModel, m_top: int, n: int) -> AllanFit:
    sel = curve.m <= m_top
    m = curve.m[sel]
    y = curve.deviation[sel] ** 2
    x = np.stack([avar_model(model.gamma, m), np.ones(len(m))], axis=1)
    edf = np.minimum(allan.edf_white_fm(n, m), allan.edf_flicker_fm(n, m))
    yhat = y.copy()
    coef = np.zeros(2)
    for _ in range(3):   # re-weight with the fitted values (var(AVAR) = 2·AVAR²/edf)
        sd = np.sqrt(2.0 / edf) * np.where(yhat > 0, yhat, max(float(y.max()), 1e-300))
        coef, _ = optimize.nnls(x / sd[:, None], y / sd)
        yhat = x @ coef
    a, b = (float(v) for v in coef)
    white2 = a * model.var_mean
    u2 = white2 + b
    # Satterthwaite: the white part is known as well as s² (ν_w); the floor rests on the
    # longest octave, whose Allan variance has the SP 1065 flicker-noise edf.
    nu_b = float(allan.edf_flicker_fm(n, m[-1]))
    denom = white2 ** 2 / model.dof + b ** 2 / nu_b
    dof = u2 ** 2 / denom if denom > 0 else float(model.dof)
    return AllanFit(a=a, b=b, m=m, u=math.sqrt(max(u2, 0.0)), dof=float(dof))


def _verdict(curve: allan.AllanCurve, model: WhiteModel, n: int, level: float) -> Verdict:
    if n < MIN_TESTABLE:
        return Verdict(False, True, None, None, None, None, None, level,
                       f"not testable: {n} cycle differences (at least {MIN_TESTABLE} needed); "
                       "the white-noise standard error is used")
    m_l = int(curve.m[curve.m <= n / 4][-1])
    model_avar = avar_model(model.gamma, np.array([1, m_l]))
    avar1 = curve.deviation[0] ** 2
    avar_l = curve.deviation[curve.m == m_l][0] ** 2
    ratio = float(avar_l / (avar1 / model_avar[0] * model_avar[1]))
    edf_l = float(allan.edf_white_fm(n, m_l))
    edf_1 = float(allan.edf_white_fm(n, 1))
    p = float(special.fdtrc(edf_l, edf_1, ratio))
    white = p >= level
    text = (f"Allan ratio at m = {m_l} cycles: R = {ratio:.3g} (white noise expects 1), "
            f"p = {p:.3g} against F({edf_l:.3g}, {edf_1:.3g}); "
            + ("consistent with white noise" if white else
               f"not white at level {level:g}: the uncertainty is widened in proportion to "
               "the evidence"))
    return Verdict(True, white, ratio, m_l, edf_l, edf_1, p, level, text)


def analyse(d: np.ndarray, model: WhiteModel, level: float = 0.05) -> TypeA:
    """Type A evaluation of the mean of the cycle differences ``d`` (see module docstring)."""
    d = np.asarray(d, dtype=float)
    n = len(d)
    if n < 2:
        raise ComputationError(f"at least 2 cycle differences are needed; got {n}")
    mean = float(d.mean())
    s = float(d.std(ddof=1))
    # a scatter at the level of float rounding (differences equal to ~16 digits) is no scatter:
    # its s, and the Allan ratio of its zero lag-1 variance, would be noise of the arithmetic
    if not s > 16 * np.finfo(float).eps * float(np.max(np.abs(d))):
        raise ComputationError("all cycle differences are equal; their scatter is zero, so no "
                               "Type A uncertainty can be evaluated")
    u_white = s * math.sqrt(model.factor)
    curve = allan.oadev(d)
    scale = s * s / model.e_s2
    avar_white = scale * avar_model(model.gamma, curve.m)
    verdict = _verdict(curve, model, n, level)
    acorr = autocorr.effective_number(d) if n >= 4 else None
    u_acorr = s / math.sqrt(n) * math.sqrt(acorr.factor) if acorr else None
    fit = _allan_fit(curve, model, verdict.m, n) if verdict.testable else None
    method, u, dof = "white", u_white, model.dof
    weight, u_full, dof_full = 0.0, None, None
    if verdict.testable and not verdict.white:
        options = [("white", u_white, model.dof),
                   ("allan-floor", fit.u, min(max(fit.dof, 1.0), model.dof))]
        if acorr is not None:
            options.append(("autocorrelation", u_acorr, min(max(acorr.n_eff - 1.0, 1.0),
                                                              model.dof)))
        full_method, u_full, dof_full = max(options, key=lambda o: o[1])
        weight = evidence_weight(verdict.p_value, level)
        if full_method != "white" and weight > 0.0:
            part_w, part_f = (1.0 - weight) * u_white ** 2, weight * u_full ** 2
            u2 = part_w + part_f
            denom = part_w ** 2 / model.dof + part_f ** 2 / dof_full
            method, u = full_method, math.sqrt(u2)
            dof = min(u2 ** 2 / denom, model.dof)
    r1 = float(autocorr.autocorrelation(d, 1)[1]) if n >= 3 else None
    return TypeA(n=n, mean=mean, s=s, u_naive=s / math.sqrt(n), u_white=u_white,
                 dof_white=model.dof, white_factor=model.factor,
                 noise_density=math.sqrt(scale), r1=r1, r1_model=float(model.rho[1]),
                 curve=curve, avar_white=avar_white, verdict=verdict, acorr=acorr,
                 u_acorr=u_acorr, fit=fit, method=method, u=u, dof=float(dof),
                 weight=weight, u_full=u_full, dof_full=dof_full)


def planning(res: TypeA, model: WhiteModel, target: float, cycle_s: float,
             used_s: float) -> dict[str, Any]:
    """Measurement time needed for u(d̄)/|d̄| = ``target`` (same cycling and settle).

    White or autocorrelation-widened: u² scales as 1/n, so n' = n·(u/u_t)². Allan floor with
    weight w (step 5): u² = [(1 − w)·u_w² + w·a·Var₁(d̄)]·n/n' + w·b, so
    n' = [(1 − w)·u_w² + w·a·Var₁(d̄)]·n/(u_t² − w·b), unreachable when w·b ≥ u_t².
    Time = n'·(cycle period).
    """
    base = abs(res.mean)
    out: dict[str, Any] = {"target_relative_uncertainty": target, "relative_base": res.mean,
                           "reached": False, "cycles_needed": None, "time_needed_s": None,
                           "time_needed_h": None, "cycle_period_s": cycle_s,
                           "time_used_s": used_s}
    if base == 0.0:
        out["text"] = "the mean difference is zero, so a relative uncertainty is undefined"
        return out
    u_t = target * base
    out["target_standard_uncertainty"] = u_t
    if res.method == "allan-floor" and res.fit is not None:
        w = res.weight
        white2 = ((1.0 - w) * res.u_white ** 2 + w * res.fit.a * model.var_mean) * res.n
        floor = w * res.fit.b
        if floor >= u_t ** 2:
            out["text"] = (f"unreachable by averaging: the Allan floor "
                           f"{math.sqrt(floor):.3g} exceeds the target {u_t:.3g}")
            return out
        n_need = white2 / (u_t ** 2 - floor)
    else:
        n_need = res.n * (res.u / u_t) ** 2
    t_need = n_need * cycle_s
    out.update(cycles_needed=float(n_need), time_needed_s=float(t_need),
               time_needed_h=float(t_need / 3600.0), reached=bool(res.u <= u_t))
    out["text"] = (f"about {n_need:.4g} cycles, {t_need / 3600.0:.3g} h of cycling, for "
                   f"u/|mean| = {target:g} ({'already reached' if res.u <= u_t else 'not yet reached'}"
                   f" with {res.n} cycles in {used_s / 3600.0:.3g} h)")
    return out
