"""Settling of the measuring chain after each pump switch, from the on/off record itself.

Used by :mod:`budget.inputs.cycles`. Three pieces, all in the reading's unit and seconds:

Mean step response
    For every complete segment (not the first or last of a record, which the record's ends may
    cut) the excess of each reading over the segment's *late level* (the mean of the readings
    in its second half, ``tail_s`` excluded), indexed by the lag from the segment's first
    reading (the switch) in sampling intervals. Averaged over the segments that follow an
    off→on switch and, separately, over those that follow an on→off switch, with the standard
    error of each mean (scatter over segments / √count). A linear drift of the offset adds the
    same slope to both directions, a transient of the chain adds opposite excesses, so the
    *antisymmetric part* R(t) = (R_off→on(t) − R_on→off(t))/2 is the transient with the drift
    removed — exactly what biases a cycle difference.

Single-exponential fit
    R(t) = A·exp(−t/τ) + c by weighted least squares (:func:`scipy.optimize.curve_fit`,
    ``absolute_sigma``: the weights are the standard errors). The fit's status is ``"fits"``
    (χ² consistent with its ν at the 0.1 % level), ``"poor"`` (a single exponential does not
    describe it: χ² too large), ``"fast"`` (τ ran to its lower bound, a twentieth of the
    sampling interval: the transient is over within about one reading), ``"failed"`` (no
    convergence, τ at its upper bound of ten segments, or no covariance) or ``"none"``
    (|A| < 3 u(A): no transient above the noise of the mean response). The lags share their
    segments, so under 1/f noise their errors are correlated and the fit's own u(A) is too
    small: :func:`fit_step` keeps the larger of it and a block-jackknife u over the segments.

Early-half versus late-half test
    For each complete segment whose kept readings (after ``settle_s`` and ``tail_s``) number at
    least 4, e = mean(first half of the kept readings) − mean(second half). A residual transient
    makes e of opposite sign after off→on and on→off switches; a linear drift gives both the
    same e. The statistic is Welch's t of e(on segments) against e(off segments) with the
    Welch–Satterthwaite ν (as :func:`scipy.stats.ttest_ind` with ``equal_var=False``; the test
    suite checks the two agree), two-sided, at level
    :data:`TRANSIENT_LEVEL`. When the residual sits in the early half, the difference of the
    two mean e's is twice the bias it leaves in a cycle difference.

Default settle time
-------------------
The smallest settle time s on the sampling grid, not below the floor, for which the residual
transient the fit predicts in a cycle difference, 2·|A|·mean(exp(−t/τ)) over the kept lags of a
median segment (|A| and τ each taken two standard uncertainties towards the larger bias), is at
most ``fraction`` (default :data:`DEFAULT_FRACTION` = 0.1) of the Type A standard uncertainty
of the result; the latter is the white-noise u found at a provisional settle time (first the
floor, then the last choice: :mod:`budget.inputs.cycles` repeats the choice until it no longer
changes, at most three times, because a large transient also inflates the scatter), scaled as
1/√(kept readings). A bias of 0.1·u changes the combined u by 0.5 % when added in quadrature,
so it is negligible in the GUM sense. Then the early/late test is run at s; while it detects
a transient, s grows by 5 % of the median segment (the test also sees a tail that is not a
single exponential). s never exceeds the cap, half the median segment.

Floor
    max(2 sampling intervals, 5 % of the median segment length). Two intervals discard the
    reading that straddles the switch and the next; 5 % guards against a transient too small
    or too fast to be seen in the mean response yet not zero, at a cost of 5 % of the data.
    Used alone when no transient is detected.
"""

from __future__ import annotations

import math
import warnings as pywarnings
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..stats import onoff

__all__ = ["TRANSIENT_LEVEL", "DEFAULT_FRACTION", "ERROR_RATIO", "FLOOR_INTERVALS",
           "FLOOR_FRACTION", "MIN_LAGS", "CAP_FRACTION", "StepResponse", "ExpFit", "HalfTest",
           "step_response", "fit_exponential", "fit_step", "half_test", "predicted_bias",
           "needed_settle", "floor_settle", "choose_settle"]

#: Two-sided level of the early/late test. Stricter than the whiteness test's 5 %: a false
#: alarm warns (or, with ``settle_policy = "refuse"``, stops the run), so about one clean
#: record in a hundred is flagged.
TRANSIENT_LEVEL = 0.01
#: Residual transient allowed in the default settle time, as a fraction of the Type A u.
DEFAULT_FRACTION = 0.1
#: A residual transient of at least this many u makes its warning severity "error": with a
#: bias b the k = 2 interval of a normal result covers Φ(2 − b/u) − Φ(−2 − b/u), 84 % at
#: b = u instead of 95 % (derivation).
ERROR_RATIO = 1.0
FLOOR_INTERVALS = 2
FLOOR_FRACTION = 0.05
CAP_FRACTION = 0.5
#: readings a segment the step-response fit needs (three parameters and two to spare)
MIN_LAGS = 5
_FIT_LEVEL = 1e-3          # χ² p-value below which a single exponential "does not fit"
MAX_POINTS = 400
#: A transient is "seen" in the step response when |A| ≥ this many u(A).
AMPLITUDE_SIGMAS = 3.0
#: Contiguous blocks of segments left out in turn by the jackknife of :func:`fit_step`.
JACKKNIFE_GROUPS = 10
JACKKNIFE_MIN = 5


@dataclass(frozen=True)
class ExpFit:
    """R(t) = A·exp(−t/τ) + c fitted to the antisymmetric step response (reading unit, s)."""

    status: str
    text: str
    amplitude: float = math.nan
    amplitude_u: float = math.nan
    tau_s: float = math.nan
    tau_u: float = math.nan
    offset: float = math.nan
    chi2: float = math.nan
    dof: int = 0

    @property
    def usable(self) -> bool:
        return self.status in ("fits", "poor")

    def to_dict(self) -> dict[str, Any]:
        def num(x: float) -> float | None:
            return float(x) if math.isfinite(x) else None
        return {"model": "A·exp(−t/τ) + c", "status": self.status, "text": self.text,
                "amplitude": num(self.amplitude), "amplitude_u": num(self.amplitude_u),
                "tau_s": num(self.tau_s), "tau_u": num(self.tau_u), "offset": num(self.offset),
                "chi2": num(self.chi2), "dof": self.dof}


@dataclass(frozen=True)
class StepResponse:
    """Mean excess over the late level after each kind of switch, by lag (see module doc)."""

    lag_s: np.ndarray
    off_on: np.ndarray
    off_on_se: np.ndarray
    on_off: np.ndarray
    on_off_se: np.ndarray
    segments_off_on: int
    segments_on_off: int
    segment_s: float
    dt: float

    @property
    def anti(self) -> np.ndarray:
        return (self.off_on - self.on_off) / 2.0

    @property
    def anti_se(self) -> np.ndarray:
        return np.hypot(self.off_on_se, self.on_off_se) / 2.0

    def to_dict(self) -> dict[str, Any]:
        sel = thin(len(self.lag_s))
        return {"lag_s": self.lag_s[sel].tolist(),
                "off_to_on": {"mean": self.off_on[sel].tolist(), "se": self.off_on_se[sel].tolist(),
                              "segments": self.segments_off_on},
                "on_to_off": {"mean": self.on_off[sel].tolist(), "se": self.on_off_se[sel].tolist(),
                              "segments": self.segments_on_off},
                "reference": "mean of the second half of each segment",
                "median_segment_s": self.segment_s, "sampling_interval_s": self.dt}


@dataclass(frozen=True)
class HalfTest:
    """Early-half minus late-half test of the kept readings (see module docstring)."""

    settle_s: float
    segments: int
    difference: float        # mean e(on) − mean e(off), reading unit
    difference_u: float
    statistic: float         # Welch t
    dof: float
    p_value: float
    level: float

    @property
    def testable(self) -> bool:
        return math.isfinite(self.p_value)

    @property
    def detected(self) -> bool:
        return self.testable and self.p_value < self.level

    @property
    def bias(self) -> float:
        """Residual bias of a cycle difference it suggests (residual in the early half)."""
        return self.difference / 2.0

    def to_dict(self) -> dict[str, Any]:
        def num(x: float) -> float | None:
            return float(x) if math.isfinite(x) else None
        return {"test": "Welch t of e = mean(early half) − mean(late half) of the kept readings, "
                        "segments after off→on against segments after on→off, two-sided",
                "settle_s": self.settle_s, "segments": self.segments,
                "difference": num(self.difference), "difference_u": num(self.difference_u),
                "statistic": num(self.statistic), "dof": num(self.dof),
                "p_value": num(self.p_value), "level": self.level, "detected": self.detected,
                "bias_estimate": num(self.bias)}


def p_text(p: float) -> str:
    """A p-value for a message: ``p = 0.013``, ``p < 1e-15``."""
    return "p < 1e-15" if p < 1e-15 else f"p = {p:.2g}"


def thin(n: int) -> slice:
    """Every k-th point, so that at most :data:`MAX_POINTS` remain."""
    return slice(None, None, max(1, math.ceil(n / MAX_POINTS)))


def _complete(seg: onoff.Segments) -> np.ndarray:
    """Per reading: in a segment that is neither the first nor the last of the record."""
    return (seg.seg_of > 0) & (seg.seg_of < seg.count - 1)


def step_response(time: np.ndarray, reading: np.ndarray, on: np.ndarray,
                  tail_s: float = 0.0, drop: np.ndarray | None = None) -> StepResponse | None:
    """Mean step response of one record; None when it has fewer than 2 complete segments of
    each kind. ``drop``: segment indices left out (the block jackknife of :func:`fit_step`)."""
    seg = onoff.segment(time, reading, on, 0.0, tail_s)
    if seg.count < 3:
        return None
    dt = seg.dt
    lengths = np.diff(seg.t_first)[1:]            # complete segments: 1 .. count − 2
    seg_s = float(np.median(lengths))
    n_lag = max(1, int(round(seg_s / dt)))
    rel = time - seg.t_first[seg.seg_of]
    length_of = np.concatenate((np.diff(seg.t_first), [np.inf]))[seg.seg_of]
    t_last = time[seg.stop - 1][seg.seg_of]
    late = (rel >= length_of / 2.0) & ((t_last - time) >= tail_s - 1e-9)
    cnt = np.bincount(seg.seg_of, weights=late, minlength=seg.count)
    ref = float(reading[0])
    with np.errstate(invalid="ignore", divide="ignore"):
        level = np.bincount(seg.seg_of, weights=np.where(late, reading - ref, 0.0),
                            minlength=seg.count) / cnt + ref
    lag = np.rint(rel / dt).astype(np.int64)
    use = _complete(seg) & seg.keep & (lag < n_lag) & (cnt[seg.seg_of] > 0)
    if drop is not None and len(drop):
        use &= ~np.isin(seg.seg_of, drop)
    excess = reading - level[seg.seg_of]
    out = {}
    counts = {}
    for name, state in (("off_on", True), ("on_off", False)):
        m = use & (seg.on[seg.seg_of] == state)
        counts[name] = int(len(np.unique(seg.seg_of[m])))
        k = np.bincount(lag[m], minlength=n_lag)[:n_lag].astype(float)
        s1 = np.bincount(lag[m], weights=excess[m], minlength=n_lag)[:n_lag]
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = s1 / k
            dev = excess[m] - mean[lag[m]]
            var = np.bincount(lag[m], weights=dev * dev, minlength=n_lag)[:n_lag] / (k - 1)
            se = np.sqrt(var / k)
        bad = k < 2
        mean[bad], se[bad] = np.nan, np.nan
        out[name] = (mean, se)
    if counts["off_on"] < 2 or counts["on_off"] < 2:
        return None
    good = np.isfinite(out["off_on"][0]) & np.isfinite(out["on_off"][0])
    lags = np.arange(n_lag)[good]
    return StepResponse(lag_s=lags * dt, off_on=out["off_on"][0][good],
                        off_on_se=out["off_on"][1][good], on_off=out["on_off"][0][good],
                        on_off_se=out["on_off"][1][good], segments_off_on=counts["off_on"],
                        segments_on_off=counts["on_off"], segment_s=seg_s, dt=dt)


def fit_exponential(resp: StepResponse) -> ExpFit:
    """Fit A·exp(−t/τ) + c to the antisymmetric step response (module docstring)."""
    from scipy import optimize

    t, r, se = resp.lag_s, resp.anti, resp.anti_se
    if len(t) < MIN_LAGS:
        return ExpFit("failed", f"only {len(t)} lags in a segment; no fit")
    positive = se[se > 0]
    floor = float(np.min(positive)) if len(positive) else max(float(np.max(np.abs(r))), 1.0) * 1e-15
    sigma = np.where(se > 0, se, floor)
    c0 = float(np.mean(r[len(r) // 2:]))
    a0 = float(r[0] - c0)
    below = np.flatnonzero(np.abs(r - c0) < abs(a0) / math.e)
    tau0 = max(float(t[below[0]]) if len(below) else resp.segment_s / 4, resp.dt / 2)
    lo, hi = resp.dt / 20.0, 10.0 * resp.segment_s

    def f(x, a, tau, c):
        return a * np.exp(-x / tau) + c

    try:
        with pywarnings.catch_warnings():
            pywarnings.simplefilter("error", optimize.OptimizeWarning)
            pywarnings.simplefilter("ignore", RuntimeWarning)
            p, cov = optimize.curve_fit(f, t, r, p0=(a0, min(max(tau0, lo * 2), hi / 2), c0),
                                        sigma=sigma, absolute_sigma=True,
                                        bounds=([-np.inf, lo, -np.inf], [np.inf, hi, np.inf]),
                                        maxfev=4000)
    except (RuntimeError, ValueError, optimize.OptimizeWarning) as exc:
        return ExpFit("failed", f"the single-exponential fit did not converge ({exc})")
    a, tau, c = (float(v) for v in p)
    ua, ut = (float(math.sqrt(v)) if v >= 0 else math.nan for v in np.diag(cov)[:2])
    chi2 = float(np.sum(((r - f(t, *p)) / sigma) ** 2))
    return _classify(resp, dict(amplitude=a, amplitude_u=ua, tau_s=tau, tau_u=ut, offset=c,
                                chi2=chi2, dof=len(t) - 3))


def _classify(resp: StepResponse, base: dict[str, Any], note: str = "") -> ExpFit:
    """The fit's status from its parameters and their standard uncertainties."""
    from scipy import special

    a, ua, tau, ut = base["amplitude"], base["amplitude_u"], base["tau_s"], base["tau_u"]
    chi2, dof = base["chi2"], base["dof"]
    lo, hi = resp.dt / 20.0, 10.0 * resp.segment_s
    if tau <= lo * 1.001:
        return ExpFit("fast", f"the transient is over within about one sampling interval "
                              f"({resp.dt:g} s): τ ran to the fit's lower bound", **base)
    if not (math.isfinite(ua) and math.isfinite(ut)) or tau >= hi * 0.999:
        return ExpFit("failed", f"the fit ran to a bound (τ = {tau:.3g} s) or its covariance "
                                "is undefined: no single time constant found", **base)
    if not abs(a) >= AMPLITUDE_SIGMAS * ua:
        return ExpFit("none", f"no transient above the noise of the mean step response "
                              f"(|A| = {abs(a):.3g} < {AMPLITUDE_SIGMAS:g} u(A) = "
                              f"{AMPLITUDE_SIGMAS * ua:.3g}{note})", **base)
    p_chi = float(special.chdtrc(dof, chi2)) if dof > 0 else math.nan   # χ² upper tail
    if dof > 0 and p_chi < _FIT_LEVEL:
        return ExpFit("poor", f"τ = {tau:.3g} s, but a single exponential does not describe the "
                              f"step response (χ²/ν = {chi2 / dof:.3g}, p = {p_chi:.2g})", **base)
    return ExpFit("fits", f"τ = {tau:.3g} ± {ut:.2g} s (χ²/ν = {chi2 / max(dof, 1):.3g}{note})",
                  **base)


def fit_step(time: np.ndarray, reading: np.ndarray, on: np.ndarray, resp: StepResponse,
             tail_s: float = 0.0, groups: int = JACKKNIFE_GROUPS) -> ExpFit:
    """:func:`fit_exponential` with u(A) and u(τ) that hold for correlated noise.

    The lags of the mean step response share their segments, so under 1/f noise their errors
    are correlated and the weighted fit's covariance understates u(A) (a wandering level looks
    like a slow transient). The block jackknife (Efron & Tibshirani, *An Introduction to the
    Bootstrap*, 1993, §11.5, delete-a-group form, memory) leaves out each of ``groups``
    contiguous blocks of complete segments in turn, refits, and takes
    u² = (g − 1)/g · Σ(θ_j − θ̄)² over the g refits that converged; the larger of this and the
    fit's own u is kept, for A and for τ, and the status is decided again with it. Under white
    noise both agree; under 1/f the jackknife is the larger. Fewer than
    :data:`JACKKNIFE_MIN` converged refits leave the fit's status "failed"."""
    fit = fit_exponential(resp)
    if fit.status in ("failed", "fast") or not math.isfinite(fit.amplitude_u):
        return fit
    complete = np.arange(1, onoff.segment(time, reading, on, 0.0, tail_s).count - 1)
    blocks = [b for b in np.array_split(complete, groups) if len(b)]
    amps, taus = [], []
    for b in blocks:
        r = step_response(time, reading, on, tail_s, drop=b)
        f = fit_exponential(r) if r is not None else None
        if f is not None and f.status not in ("failed", "fast"):
            amps.append(f.amplitude)
            taus.append(f.tau_s)
    g = len(amps)
    if g < JACKKNIFE_MIN:
        return ExpFit("failed", f"{fit.text}; only {g} of {len(blocks)} jackknife refits "
                                "converged: no stable single time constant",
                      **{k: getattr(fit, k) for k in ("amplitude", "amplitude_u", "tau_s",
                                                      "tau_u", "offset", "chi2", "dof")})
    ua = math.sqrt((g - 1) / g * float(np.sum((np.array(amps) - np.mean(amps)) ** 2)))
    ut = math.sqrt((g - 1) / g * float(np.sum((np.array(taus) - np.mean(taus)) ** 2)))
    base = dict(amplitude=fit.amplitude, amplitude_u=max(fit.amplitude_u, ua), tau_s=fit.tau_s,
                tau_u=max(fit.tau_u, ut), offset=fit.offset, chi2=fit.chi2, dof=fit.dof)
    note = "; u(A), u(τ) by the block jackknife" if ua > fit.amplitude_u else ""
    return _classify(resp, base, note)


def half_test(time: np.ndarray, reading: np.ndarray, on: np.ndarray, settle_s: float,
              tail_s: float = 0.0, level: float = TRANSIENT_LEVEL) -> HalfTest:
    """Early-half versus late-half test at ``settle_s`` (module docstring)."""
    from scipy import special

    seg = onoff.segment(time, reading, on, settle_s, tail_s)
    m = seg.keep & _complete(seg)
    idx = np.flatnonzero(m)
    so = seg.seg_of[idx]
    k = np.bincount(so, minlength=seg.count)
    first = np.concatenate(([0], np.cumsum(k)[:-1]))
    pos = np.arange(len(idx)) - first[so]
    half = k[so] // 2
    early = pos < half
    late = pos >= k[so] - half
    ref = float(reading[0])
    y = reading[idx] - ref
    with np.errstate(invalid="ignore", divide="ignore"):
        e = (np.bincount(so, weights=np.where(early, y, 0.0), minlength=seg.count)
             / np.bincount(so, weights=early, minlength=seg.count)
             - np.bincount(so, weights=np.where(late, y, 0.0), minlength=seg.count)
             / np.bincount(so, weights=late, minlength=seg.count))
    ok = k >= 4
    e_on, e_off = e[ok & seg.on], e[ok & ~seg.on]
    n = int(ok.sum())
    if len(e_on) < 2 or len(e_off) < 2 or not (np.std(e_on) > 0 or np.std(e_off) > 0):
        return HalfTest(settle_s, n, math.nan, math.nan, math.nan, math.nan, math.nan, level)
    # Welch's t and its Welch–Satterthwaite ν (as scipy.stats.ttest_ind(equal_var=False),
    # written out with scipy.special so that a run need not import scipy.stats)
    va, vb = np.var(e_on, ddof=1) / len(e_on), np.var(e_off, ddof=1) / len(e_off)
    diff = float(np.mean(e_on) - np.mean(e_off))
    u = math.sqrt(va + vb)
    tstat = diff / u
    nu = (va + vb) ** 2 / (va ** 2 / (len(e_on) - 1) + vb ** 2 / (len(e_off) - 1))
    p = float(2.0 * special.stdtr(nu, -abs(tstat)))
    return HalfTest(settle_s, n, diff, u, tstat, float(nu), p, level)


def _kept_lags(resp: StepResponse, settle: np.ndarray, tail_s: float) -> tuple[np.ndarray, np.ndarray]:
    """Per candidate settle: number of kept lags in a median segment and mean exp-weights grid."""
    n_lag = max(1, int(round(resp.segment_s / resp.dt)))
    lag_t = np.arange(n_lag) * resp.dt
    keep = (lag_t[None, :] >= settle[:, None] - 1e-9) & \
           ((lag_t[-1] - lag_t)[None, :] >= tail_s - 1e-9)
    return keep, lag_t


def predicted_bias(resp: StepResponse, fit: ExpFit, settle: np.ndarray | float,
                   tail_s: float = 0.0) -> np.ndarray:
    """Bias of a cycle difference the fit predicts at each settle time (reading unit, ≥ 0),
    with |A| and τ taken two standard uncertainties towards the larger bias."""
    s = np.atleast_1d(np.asarray(settle, dtype=float))
    if not fit.usable:
        return np.full(len(s), np.nan)
    keep, lag_t = _kept_lags(resp, s, tail_s)
    a = abs(fit.amplitude) + 2.0 * fit.amplitude_u
    tau = fit.tau_s + 2.0 * fit.tau_u
    w = np.exp(-lag_t / tau)
    with np.errstate(invalid="ignore", divide="ignore"):
        return 2.0 * a * (keep @ w) / keep.sum(axis=1)


def needed_settle(resp: StepResponse, fit: ExpFit, u: float,
                  fraction: float = DEFAULT_FRACTION) -> float | None:
    """Settle time after which the fitted transient (|A| and τ two standard uncertainties
    towards more bias) leaves at most ``fraction``·``u`` in a cycle difference, s, on the
    sampling grid; None without a usable fit.

    The bias 2·A'·mean(exp(−t/τ')) over the kept lags is below its first term 2·A'·exp(−s/τ'),
    so s = τ'·ln(2·A'/(fraction·u)) is enough whatever the segment length beyond s (an upper
    bound, derivation). Kept at half a segment, the segment must be at least 2·s long."""
    if not fit.usable or not (u > 0):
        return None
    a = abs(fit.amplitude) + 2.0 * fit.amplitude_u
    tau = fit.tau_s + 2.0 * fit.tau_u
    ratio = 2.0 * a / (fraction * u)
    s = tau * math.log(ratio) if ratio > 1 else 0.0
    return float(math.ceil(s / resp.dt - 1e-9) * resp.dt)


def floor_settle(segment_s: float, dt: float) -> float:
    """The floor of the default settle time, s (module docstring)."""
    return max(FLOOR_INTERVALS * dt, FLOOR_FRACTION * segment_s)


def choose_settle(time: np.ndarray, reading: np.ndarray, on: np.ndarray, resp: StepResponse,
                  fit: ExpFit, u_ref: float, settle_ref: float, tail_s: float = 0.0,
                  fraction: float = DEFAULT_FRACTION, start: float = 0.0) -> dict[str, Any]:
    """The data-derived settle time (module docstring) and how it was found.

    ``u_ref`` is the white-noise standard uncertainty of the result (reading unit) found with
    ``settle_ref`` (s); at another settle time it is scaled as 1/√(kept readings). No settle
    time below ``start`` (s) is considered (used to look beyond a user's choice).
    Returns a dict with ``settle_s``, ``floor_s``, ``cap_s``, ``by`` (``"floor"``, ``"fit"``,
    ``"test"``, ``"cap"``), ``text``, ``predicted_bias`` and ``test`` (the last
    :class:`HalfTest`).
    """
    floor = floor_settle(resp.segment_s, resp.dt)
    cap = max(floor, CAP_FRACTION * resp.segment_s)
    floor = min(max(floor, start), cap)
    grid = np.arange(math.ceil(floor / resp.dt - 1e-9), math.floor(cap / resp.dt + 1e-9) + 1) * resp.dt
    if len(grid) == 0:
        grid = np.array([floor])
    by, s = "floor", float(grid[0])
    if fit.usable and fit.status != "none":
        bias = predicted_bias(resp, fit, grid, tail_s)
        keep, _ = _kept_lags(resp, np.concatenate(([settle_ref], grid)), tail_s)
        kept = keep.sum(axis=1).astype(float)
        u = u_ref * np.sqrt(kept[0] / np.maximum(kept[1:], 1))
        ok = np.flatnonzero(bias <= fraction * u)
        if len(ok):
            s = float(grid[ok[0]])
            by = "fit" if ok[0] > 0 else "floor"
        else:
            s, by = float(grid[-1]), "cap"
    step = max(resp.dt, FLOOR_FRACTION * resp.segment_s)
    test = half_test(time, reading, on, s, tail_s)
    while test.detected and s < cap - 1e-9:
        s = min(cap, s + step)
        by = "test"
        test = half_test(time, reading, on, s, tail_s)
    if test.detected:
        by = "cap"
    bias_s = float(predicted_bias(resp, fit, s, tail_s)[0])
    texts = {"floor": f"no transient that needs more than the floor ({floor:.4g} s: the larger "
                      f"of {FLOOR_INTERVALS} sampling intervals and {FLOOR_FRACTION:.0%} of the "
                      "median segment)",
             "fit": f"the fitted transient falls below {fraction:g} of the Type A u",
             "test": "the early/late test still saw a transient after the fitted settle time; "
                     "lengthened until it did not",
             "cap": f"the transient is not removed even at the cap ({cap:.4g} s, half the "
                    "median segment)"}
    return {"settle_s": s, "floor_s": floor, "cap_s": cap, "by": by, "text": texts[by],
            "fraction": fraction, "u_reference": u_ref,
            "predicted_bias": bias_s if math.isfinite(bias_s) else None, "test": test}
