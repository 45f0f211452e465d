"""The ``cycles`` input module: Type A term of an on/off record.

Checks against outside facts and derivations:
* "Neighbouring differences share an off segment, so they are correlated; for white noise the
  naive s/√n is about 13 % too small" (shared/DOMAIN.md, common practice). Derived in
  budget/stats/onoff.py: ρ₁ = 1/6, Var(d̄) = (4/3)·s²/n, naive 1 − √(3/4) = 13.4 % low;
  checked here in closed form and by Monte Carlo.
* u(I) ≈ S·√(2/(δT)) (shared/DOMAIN.md, derivation) — exact form derived in onoff.py.
* Zhang/Witt effective number (Metrologia 43, S276, 2006; 44, 201, 2007), SP 1065 edf.
* Synthetic records with a known step, drift and noise, generated here with fixed seeds
  (recovery tests: the truth is known by construction).
"""

import json
import math
from pathlib import Path

import numpy as np
import pytest
from numeric import near
from scipy import signal, stats

from budget.errors import DataError, SpecError
from budget.inputs import cycles, run_module
from budget.inputs.context import InputContext
from budget.stats import onoff, typea

SEG = 20.0        # s, segment length (switch to switch)
DT = 1.0          # s, sampling interval
STEP = 1e-3       # V, the on − off step (truth)
WHITE = 1e-5      # V, white noise per reading → S = WHITE·√(2·DT) V/√Hz
SETTLE = 0.2 * SEG  # the module's default settle (20 % of the segment)


# ----------------------------------------------------------------------------- fixtures
def flicker_series(rng, k):
    """Unit-variance 1/f sequence of k values, spectrum from 1/(8k) to the Nyquist rate."""
    size = 8 * k
    f = np.fft.rfftfreq(size)
    f[0] = np.inf
    x = np.fft.irfft(np.fft.rfft(rng.normal(size=size)) / np.sqrt(f), size)
    return x[:k] / x.std()


def synth(rng, cycles_, *, seg=SEG, dt=DT, step=STEP, white=WHITE, flicker=0.0, tau=0.25,
          drift=True, start_on=False):
    """An invented on/off record: off, on, off, ..., off (2·cycles + 1 segments).

    reading = offset drift + response·current + white noise, where the offset drifts
    linearly plus a slow sinusoid of one period per record, the chain follows the pump with a
    first-order time constant ``tau`` and the current may carry 1/f fluctuations (one value
    per segment: the pump current or the chain gain wandering — noise the switching does not
    cancel). The slow sinusoid biases the linear estimator by at most A·(2πΔ/P)²/2 =
    2e-5·(2π·20/8020)²/2 ≈ 2.5e-9 V per cycle (curvature × Δ², derivation), about 1 % of u,
    and averages to zero over the period.
    """
    n = int(round((2 * cycles_ + 1) * seg / dt))
    t = np.arange(n) * dt
    seg_index = (t // seg).astype(int)
    on = (seg_index % 2 == 1) ^ start_on
    a = math.exp(-dt / tau)
    response = signal.lfilter([1 - a], [1, -a], on.astype(float))
    current = step + (flicker * flicker_series(rng, seg_index[-1] + 1)[seg_index]
                      if flicker else 0.0)
    offset = 2e-4 + (3e-9 * t + 2e-5 * np.sin(2 * np.pi * t / t[-1]) if drift else 0.0)
    y = offset + response * current + white * rng.normal(size=n)
    return t, y, on


def write_csv(path: Path, t, y, on, labels=("on", "off")):
    lab = np.where(on, labels[0], labels[1])
    with open(path, "w") as fh:
        fh.write("time_s,reading,pump\n")
        fh.writelines(f"{a:.6f},{b:.12g},{c}\n" for a, b, c in zip(t, y, lab))
    return path


def ctx_for(tmp_path, **table):
    return InputContext(name="dV", table={"module": "cycles", **table}, folder=tmp_path,
                        spec_file="spec.toml")


def pipeline(t, y, on, settle=SETTLE, estimator="linear"):
    """The statistics evaluate() uses, on arrays (fast enough for ensembles)."""
    seg = onoff.segment(t, y, on, settle)
    diff = onoff.differences(seg, estimator)
    model = onoff.white_model(diff)
    return typea.analyse(diff.d, model), model, diff


def chi2_bounds(n, p=0.001):
    """Two-sided (1 − p) bounds of mean(z²) over n values when z ~ N(0, 1): χ²_n/n."""
    return stats.chi2.ppf(p / 2, n) / n, stats.chi2.ppf(1 - p / 2, n) / n


def binomial_low(n, p, z=3.1):
    """Lower bound of an observed fraction for true rate p (normal approx., z sd ≈ 0.1 %)."""
    return p - z * math.sqrt(p * (1 - p) / n)


# ------------------------------------------------------------------ the correlation fact
def test_white_model_closed_form_and_the_13_percent():
    # Regular record, equal kept counts: C = v·tridiag(1/4, 3/2, 1/4) (derivation in
    # onoff.py); 1ᵀC1 = (2n − 1/2)v, tr C = 1.5nv, so n·g = (2n − ½)(n − 1)/(n(1.5n − 2 + 1/(2n))).
    rng = np.random.default_rng(1)
    n = 200
    t, y, on = synth(rng, n)
    res, model, diff = pipeline(t, y, on)
    assert diff.n == n
    ng = (2 * n - 0.5) * (n - 1) / (n * (1.5 * n - 2 + 1 / (2 * n)))
    assert res.u_white / res.u_naive == near(math.sqrt(ng), rel=1e-12)
    assert model.rho[1] == near(1 / 6, rel=1e-12)          # ρ₁ = (1/4)/(3/2)
    assert model.rho[2] == 0.0
    # large n: √(4/3) = 1.1547, i.e. s/√n is 1 − √(3/4) = 13.4 % too small (DOMAIN.md: ≈ 13 %)
    big = 10 ** 6
    ng_big = (2 * big - 0.5) * (big - 1) / (big * (1.5 * big - 2 + 1 / (2 * big)))
    assert 1 - 1 / math.sqrt(ng_big) == near(0.134, abs=5e-4)
    # Satterthwaite ν → n·(1.5)²/(1.5² + 2/16) = 18n/19 (derivation: tr C², band 1/4)
    assert model.dof == near(18 * n / 19, rel=0.02)


def test_domain_planning_formula_is_the_white_model():
    # u = S·√(2/(δT)) (DOMAIN.md); exactly, Var(d̄)/S² = (2n − ½)/(2n²kΔt) =
    # [2/(δT)]·(1 − 1/(4n)) with δT = 2n·k·Δt the kept time (derivation).
    rng = np.random.default_rng(2)
    n = 150
    t, y, on = synth(rng, n)
    _, model, _ = pipeline(t, y, on)
    k = SEG / DT - SETTLE / DT                      # kept readings per segment
    delta_t = 2 * n * k * DT
    assert model.var_mean == near(2 / delta_t * (1 - 1 / (4 * n)), rel=1e-12)


# ------------------------------------------------------------------------ white ensembles
@pytest.fixture(scope="module")
def white_ensemble():
    rng = np.random.default_rng(20261201)
    out = []
    for _ in range(200):
        t, y, on = synth(rng, 200)
        res, _, _ = pipeline(t, y, on)
        out.append(res)
    return out


def test_white_records_normalised_errors_have_unit_variance(white_ensemble):
    # z = (estimate − truth)/u over 200 records with known step: mean z² within the χ²_200
    # bounds (99.9 %), stretched by ν/(ν − 2) for the t-distributed z (ν ≈ 190).
    z = np.array([(r.mean - STEP) / r.u for r in white_ensemble])
    lo, hi = chi2_bounds(len(z))
    nu = np.median([r.dof for r in white_ensemble])
    assert lo < np.mean(z ** 2) < hi * nu / (nu - 2)
    covered = np.mean([abs(r.mean - STEP) <= stats.t.ppf(0.975, r.dof) * r.u
                       for r in white_ensemble])
    assert covered >= binomial_low(len(z), 0.95)


def test_naive_standard_error_is_too_small_by_the_derived_factor(white_ensemble):
    # With the naive s/√n, mean z² must be 4/3 (derivation above); χ² bounds as before.
    zn = np.array([(r.mean - STEP) / r.u_naive for r in white_ensemble])
    lo, hi = chi2_bounds(len(zn))
    assert lo * 4 / 3 < np.mean(zn ** 2) < hi * 4 / 3
    # and the lag-1 autocorrelation of the differences averages to ρ₁ = 1/6; the mean of
    # 200 estimates has sd ≈ √(0.92/n)/√200 ≈ 0.005 (Bartlett for MA(1), memory) plus the
    # known −(1 + 2ρ₁)/n bias of r₁ ≈ −0.007 (memory): 4 sd window around 1/6 − 0.007
    r1 = np.mean([r.r1 for r in white_ensemble])
    assert abs(r1 - (1 / 6 - 0.007)) < 4 * 0.005


def test_white_verdict_false_alarm_rate_matches_the_level(white_ensemble):
    # Under white noise the Allan ratio test rejects at about its level 0.05: binomial upper
    # bound for 200 records at 3.1 sd.
    alarms = np.mean([not r.verdict.white for r in white_ensemble])
    assert alarms <= 0.05 + 3.1 * math.sqrt(0.05 * 0.95 / 200)


def test_noise_density_recovers_the_white_level(white_ensemble):
    # S = σ·√(2Δt) for white readings σ sampled every Δt without dead time (one-sided
    # density, derivation in onoff.py). Mean of 200 S² estimates, each χ²_ν/ν (ν ≈ 190):
    # relative sd ≈ √(2/(190·200)) = 0.7 %; 4 sd.
    s2 = np.mean([r.noise_density ** 2 for r in white_ensemble])
    assert s2 == near(WHITE ** 2 * 2 * DT, rel=4 * 0.0073)


def test_cubic_estimator_is_calibrated_too():
    # the same white-noise model for the four-off interpolation (weights −1/16, 9/16, 9/16,
    # −1/16): mean z² over 100 records within χ² bounds
    rng = np.random.default_rng(5)
    z = []
    for _ in range(100):
        t, y, on = synth(rng, 120)
        res, _, _ = pipeline(t, y, on, estimator="cubic")
        z.append((res.mean - STEP) / res.u_white)
    lo, hi = chi2_bounds(len(z))
    assert lo < np.mean(np.square(z)) < hi * 1.03      # × ν/(ν − 2) ≈ 1.02 for ν ≈ 105, rounded up


# ----------------------------------------------------------------------- flicker ensemble
def flicker_variance_ratio(cycles_: int, max_m: int = 64) -> float:
    """Var(mean of the on-segment flicker values) / min over octaves m ≤ max_m of E[AVAR(m)].

    Derived from the spectrum of :func:`flicker_series` alone (no package code): x is the
    circular filtering of white noise by 1/√f on 8k points, so its autocovariance is the
    inverse DFT of the two-sided 1/f spectrum (zero at f = 0); the flicker part of each
    difference is x at an on segment (odd index), so its covariance is γ(2|i − i'|).
    E[AVAR(m)] = ½ E[(ȳ_2 − ȳ_1)²] of two adjacent m-means (SP 1065 eq. 6) = ½ wᵀCw with
    w = (−1/m, …, +1/m). The normalisation x/std(x) scales both alike and cancels.
    """
    k = 2 * cycles_ + 1
    n = 8 * k
    f = np.fft.rfftfreq(n)
    spec = np.zeros_like(f)
    spec[1:] = 1 / f[1:]
    full = np.concatenate([spec, spec[1:n - f.size + 1][::-1]])
    gamma = np.real(np.fft.ifft(full))
    idx = 2 * np.arange(cycles_) + 1
    cov = gamma[np.abs(idx[:, None] - idx[None, :])]
    var_mean = cov.sum() / cycles_ ** 2
    avars = []
    m = 1
    while m <= max_m and 2 * m <= cycles_:
        w = np.r_[np.full(m, -1 / m), np.full(m, 1 / m)]
        avars.append(0.5 * w @ cov[:2 * m, :2 * m] @ w)
        m *= 2
    return var_mean / min(avars)


def test_flicker_records_widened_while_naive_fails():
    # 1/f fluctuation of the step (per-segment sd 3e-5 V against 2.5e-6 V of white noise per
    # segment mean), spectrum down to 1/(8T). The tool's convention takes the flat Allan floor
    # b as u² of the mean; for this generator the variance of the mean exceeds the Allan
    # variance at every octave m ≤ 64 by at most the ratio r of flicker_variance_ratio (exact
    # from the generator's spectrum, ≈ 1.26; sampled 1/f noise is not quite flat in AVAR). So
    # the expected coverage is at least 2Φ(1.96/√r) − 1 ≈ 0.92 (derivation; the normal
    # quantile is the conservative side of t_ν/√r for the estimated floor's ν). Bounds: ours
    # ≥ that − 3.1 sd of a binomial fraction of 200. The naive s/√n, which ignores the floor,
    # must cover < 0.5 and the verdict must flag ≥ 90 % of the records (loose bounds, project
    # convention: both are far from 95 % / 5 % for a record dominated by 1/f noise).
    r = flicker_variance_ratio(200)
    assert 1.1 < r < 1.4, r
    p_expected = 2 * stats.norm.cdf(1.96 / math.sqrt(r)) - 1
    rng = np.random.default_rng(31)
    ours, naive, flagged = [], [], []
    for _ in range(200):
        t, y, on = synth(rng, 200, flicker=3e-5)
        res, _, diff = pipeline(t, y, on)
        err = abs(res.mean - STEP)
        ours.append(err <= stats.t.ppf(0.975, res.dof) * res.u)
        naive.append(err <= stats.t.ppf(0.975, diff.n - 1) * res.u_naive)
        flagged.append(not res.verdict.white)
    assert np.mean(ours) >= binomial_low(200, p_expected)
    assert np.mean(naive) < 0.5
    assert np.mean(flagged) >= 0.9


# ---------------------------------------------------------------- estimators (noise-free)
def test_linear_estimator_leaves_the_quadratic_term_cubic_removes_it():
    # x(t) = q·t²: (x(t − Δ) + x(t + Δ))/2 = x(t) + qΔ², so d = I − qΔ² with Δ = SEG for a
    # regular record (derivation); a cubic through four points is exact for degree ≤ 3.
    t = np.arange(0, 21 * SEG, DT)
    on = (t // SEG).astype(int) % 2 == 1
    q, c3 = 1e-9, 1e-13
    seg = onoff.segment(t, 5e-4 + q * t ** 2 + STEP * on, on, 0.0)
    d = onoff.differences(seg, "linear").d
    np.testing.assert_allclose(d, STEP - q * SEG ** 2, rtol=1e-9)
    seg3 = onoff.segment(t, 5e-4 + q * t ** 2 + c3 * t ** 3 + STEP * on, on, 0.0)
    np.testing.assert_allclose(onoff.differences(seg3, "cubic").d, STEP, rtol=1e-9)


def test_unequal_segments_linear_drift_cancels_exactly():
    # time-weighted interpolation: exact for a linear offset whatever the segment lengths
    lengths = [17, 30, 22, 41, 15, 26, 33, 19, 28]
    on = np.concatenate([np.full(k, i % 2 == 1) for i, k in enumerate(lengths)])
    t = np.arange(len(on)) * 0.5
    seg = onoff.segment(t, 1e-4 + 7e-6 * t + STEP * on, on, 2.0)
    np.testing.assert_allclose(onoff.differences(seg, "linear").d, STEP, rtol=1e-10)


# ------------------------------------------------------------------- the module end to end
def test_module_matches_pipeline_and_reports(tmp_path):
    # Wiring check (issue 18: not a value check): the module's quantity equals the statistics
    # run on the same arrays (pipeline() above, the same code), read back through the CSV; the
    # value check is the recovery of the known STEP below and the ensembles above.
    rng = np.random.default_rng(8)
    t, y, on = synth(rng, 100)
    write_csv(tmp_path / "run.csv", t, y, on)
    result = cycles.evaluate(ctx_for(tmp_path, file="run.csv", target_relative_uncertainty=1e-4))
    (q,) = result.quantities
    ref, _, _ = pipeline(t, y, on)
    assert q.name == "dV" and q.unit == "V" and q.evaluation == "A"
    assert q.value == near(ref.mean, rel=1e-9)          # CSV keeps 12 digits
    assert q.standard_uncertainty == near(ref.u, rel=1e-6)
    assert q.dof == near(ref.dof, rel=1e-9)
    # estimate within its expanded uncertainty (99 % two-sided t interval)
    assert abs(q.value - STEP) <= stats.t.ppf(0.995, q.dof) * q.standard_uncertainty
    d = result.diagnostics
    json.dumps(d, allow_nan=False)                               # plain JSON
    assert d["cycles_used"] == 100 and d["cycles_rejected"] == 0
    assert d["records"][0]["settle_s"] == near(SETTLE)
    assert d["records"][0]["settle_default"] is True
    assert d["noise_density_unit"] == "V/√Hz"
    assert d["white_noise"]["test"] and "p_value" in d["white_noise"]
    # rows: segment 0 is rows 1-20, the first 4 s (rows 1-4) are discarded
    assert q.provenance.files[0].rows.startswith("5-20, 25-40")
    assert len(q.provenance.files[0].sha256) == 64
    assert q.provenance.method and q.provenance.dof_reason and q.provenance.distribution_reason
    ids = {f["id"] for f in d["figures"]}
    assert ids == {"cycles-differences", "cycles-allan", "cycles-settling"}
    for fig in d["figures"]:
        assert {"title", "xlabel", "ylabel", "xscale", "yscale", "series"} <= set(fig)
        for s in fig["series"]:
            assert len(s["x"]) <= 400 and s["style"] in ("points", "line", "band")


def test_planning_time_reaches_the_target(tmp_path):
    # n' = n·(u/u_t)² cycles (white regime, typea.planning). Run the planned record and check
    # its u against the target: u²/u_t² is a ratio of two scatter estimates, F(ν', ν) with
    # ν ≈ 0.95n (Satterthwaite above); 99.9 % bounds.
    rng = np.random.default_rng(9)
    t, y, on = synth(rng, 100)
    res, model, _ = pipeline(t, y, on)
    assert res.method == "white"
    target = res.u / STEP / 2.0                       # half the present uncertainty
    plan = typea.planning(res, model, target, cycle_s=2 * SEG, used_s=t[-1])
    assert plan["cycles_needed"] == near(100 * (res.u / (target * res.mean)) ** 2)
    assert plan["time_needed_s"] == near(plan["cycles_needed"] * 2 * SEG)
    n_new = int(round(plan["cycles_needed"]))
    t2, y2, on2 = synth(rng, n_new)
    res2, _, _ = pipeline(t2, y2, on2)
    ratio = (res2.u / (target * res.mean)) ** 2
    lo = stats.f.ppf(0.0005, 0.95 * n_new, 0.95 * 100)
    hi = stats.f.ppf(0.9995, 0.95 * n_new, 0.95 * 100)
    assert lo < ratio < hi


def test_planning_floor_makes_a_target_unreachable():
    # Allan floor b: u² = a·Var₁·n/n' + b can never drop below b (typea.planning)
    rng = np.random.default_rng(10)
    t, y, on = synth(rng, 200, flicker=3e-5)
    res, model, _ = pipeline(t, y, on)
    assert res.method == "allan-floor"
    tiny = 0.5 * math.sqrt(res.fit.b) / abs(res.mean)
    plan = typea.planning(res, model, tiny, 2 * SEG, t[-1])
    assert plan["time_needed_s"] is None and "unreachable" in plan["text"]


def test_settle_removes_the_transient(tmp_path):
    # chain time constant 2 s, 60 s segments, readings every 1 s through the first-order
    # filter y_i = a·y_(i−1) + (1 − a)·x_i, a = e^(−1/2): after a switch the reading lags by
    # step·a^(j+1) at sample j, in total step·a/(1 − a) reading-intervals. With settle_s = 0
    # the on means are low and the off means high by step·[a/(1 − a)]/60 each, so d is low
    # by 2·step·[a/(1 − a)]/60 = 5.14e-5 V (derivation) — far beyond u; with settle_s = 30 s
    # the residue is a³⁰ ≈ e^(−15) of the step.
    rng = np.random.default_rng(11)
    t, y, on = synth(rng, 60, seg=60.0, tau=2.0)
    write_csv(tmp_path / "r.csv", t, y, on, labels=("1", "0"))
    biased = cycles.evaluate(ctx_for(tmp_path, file="r.csv", settle_s=0)).quantities[0]
    assert biased.value - STEP < -5 * biased.standard_uncertainty
    a = math.exp(-0.5)
    assert biased.value - STEP == near(-2 * STEP * a / (1 - a) / 60, rel=0.05)
    good = cycles.evaluate(ctx_for(tmp_path, file="r.csv", settle_s=30)).quantities[0]
    assert abs(good.value - STEP) < 3.3 * good.standard_uncertainty


def test_pooled_files_and_window(tmp_path):
    rng = np.random.default_rng(12)
    parts = []
    # the data-derived settle time is the floor here, max(2 intervals, 5 % of 20 s) = 2 s
    # (budget/inputs/settling.py): the chain's τ = 0.25 s is over within one reading
    for name in ("a.csv", "b.csv"):
        t, y, on = synth(rng, 40)
        write_csv(tmp_path / name, t, y, on)
        parts.append(pipeline(t, y, on, settle=2.0)[2])
    r = cycles.evaluate(ctx_for(tmp_path, files=["a.csv", "b.csv"]))
    assert [d["settle_s"] for d in r.diagnostics["settling"]] == [2.0, 2.0]
    (q,) = r.quantities
    pooled = np.concatenate([p.d for p in parts])
    assert r.diagnostics["cycles_used"] == 80
    assert q.value == near(pooled.mean(), rel=1e-9)
    assert [f.path for f in q.provenance.files] == ["a.csv", "b.csv"]
    # window: only readings from 400 s on; segment starting at 400 s is the first one
    w = cycles.evaluate(ctx_for(tmp_path, file="a.csv", start_s=400.0, stop_s=1200.0,
                                settle_s=SETTLE))
    assert w.quantities[0].provenance.files[0].rows.startswith("405-420")
    assert w.diagnostics["cycles_used"] == 19       # on segments 21, 23, ..., 57
    # the reading at 1200 s opens a segment of one reading that the settle cut empties: an
    # edge segment, so it is dropped rather than refused (onoff.usable_on_segments)


def test_rejection_is_off_by_default_and_listed_when_on(tmp_path):
    rng = np.random.default_rng(13)
    t, y, on = synth(rng, 60)
    # a glitch in on segment 21 (rows 421-440); in an off segment it would spoil two cycles
    y[(t >= 21 * SEG + 8) & (t < 21 * SEG + 12)] += 5e-3
    write_csv(tmp_path / "g.csv", t, y, on)
    plain = cycles.evaluate(ctx_for(tmp_path, file="g.csv"))
    assert plain.diagnostics["cycles_rejected"] == 0
    assert plain.diagnostics["rejection"]["rule"] == "none"
    rej = cycles.evaluate(ctx_for(tmp_path, file="g.csv", rejection="mad"))
    d = rej.diagnostics
    assert d["cycles_rejected"] == 1 and d["cycles_used"] == 59
    assert d["rejection"]["rejected"][0]["rows"] == "421-440"
    assert any("rejected" in n for n in rej.quantities[0].provenance.notes)
    assert abs(rej.quantities[0].value - STEP) < abs(plain.quantities[0].value - STEP)


def test_large_record_figures_are_downsampled(tmp_path):
    rng = np.random.default_rng(14)
    t, y, on = synth(rng, 1000, seg=4.0, dt=0.5)
    write_csv(tmp_path / "big.csv", t, y, on)
    d = cycles.evaluate(ctx_for(tmp_path, file="big.csv")).diagnostics
    fig = next(f for f in d["figures"] if f["id"] == "cycles-differences")
    pts = fig["series"][0]
    assert len(pts["x"]) <= 400 and "yerr" in pts and "means of" in pts["label"]


def test_registry_refuses_unknown_keys(tmp_path):
    rng = np.random.default_rng(15)
    write_csv(tmp_path / "r.csv", *synth(rng, 10))
    with pytest.raises(SpecError) as e:
        run_module(ctx_for(tmp_path, file="r.csv", setle_s=3))
    assert "settle_s" in str(e.value)
    assert run_module(ctx_for(tmp_path, file="r.csv", settle_s=3)).quantities[0].name == "dV"


# ------------------------------------------------------------------------------ bad input
HEADER = "time_s,reading,pump\n"
GOOD_ROWS = "".join(f"{i},{(1e-3 if (i // 4) % 2 else 0) + 1e-6 * (i % 3)},"
                    f"{'on' if (i // 4) % 2 else 'off'}\n" for i in range(20))


def _data_error(tmp_path, content, **table):
    p = tmp_path / "bad.csv"
    if isinstance(content, bytes):
        p.write_bytes(content)
    else:
        p.write_text(content)
    with pytest.raises(DataError) as e:
        cycles.evaluate(ctx_for(tmp_path, file="bad.csv", **{"settle_s": 0, **table}))
    err = e.value
    assert err.file and err.file.endswith("bad.csv")
    assert "\n" not in err.one_line()
    return err


def _rows(k, value):
    lines = GOOD_ROWS.splitlines(keepends=True)
    lines[k - 1] = value + "\n"
    return HEADER + "".join(lines)


def test_good_fixture_is_accepted(tmp_path):
    (tmp_path / "ok.csv").write_text(HEADER + GOOD_ROWS)
    q = cycles.evaluate(ctx_for(tmp_path, file="ok.csv", settle_s=0)).quantities[0]
    assert q.value == near(1e-3, rel=1e-2)


@pytest.mark.parametrize("content, row, field, words", [
    ("time_s,reading\n0,1\n", None, "pump", "missing column"),
    ("time_s,reeding,pump\n0,1,on\n", None, "reeding", "did you mean 'reading'"),
    ("time_s,reading,pump,pump\n0,1,on,on\n", None, "pump", "twice"),
    (_rows(3, "2,abc,off"), 3, "reading", "'abc'"),
    (_rows(5, "4,NaN,on"), 5, "reading", "'NaN'"),
    (_rows(6, "5,inf,on"), 6, "reading", "'inf'"),
    (_rows(7, "6,,on"), 7, "reading", "missing value"),
    (_rows(8, "x,1,on"), 8, "time_s", "'x'"),
    (_rows(9, "3.5,1e-3,on"), 9, "time_s", "increase"),
    (_rows(10, "8,1e-3,on"), 10, "time_s", "increase"),          # equal to row 9's time
    (_rows(11, "10,1e-3,maybe"), 11, "pump", "'maybe'"),
    (_rows(12, "11,1e-3,2"), 12, "pump", "'2'"),
    (_rows(4, "3,1e-3,off,7"), 4, None, "fields"),
    (_rows(1, "0,0,on,7"), 1, None, "fields"),                   # the first data row too
    (HEADER + "0,0,off\n1,0,off\n2,1,on\n3,1,on\n", None, "pump", "no complete cycle"),
    ("", None, None, "empty"),
    ("# only a comment\n\n", None, None, "empty"),
    (HEADER, None, None, "no data rows"),
    (b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR" + bytes(range(256)), None, None, "not a text"),
    (b"time_s,reading,pump\n0,\xff\xfe,on\n", None, None, "UTF-8"),
])
def test_bad_input_names_file_row_column(tmp_path, content, row, field, words):
    err = _data_error(tmp_path, content)
    assert err.row == row
    assert err.field == field
    assert words in err.one_line()


def test_settle_longer_than_a_segment(tmp_path):
    # segments of 4 readings 1 s apart: settle_s = 5 leaves none. The edge segments are
    # dropped (they may be cut by the record's ends); the first interior one that a cycle
    # needs is segment 2, rows 9-12, and is named.
    rows = "".join(f"{i},{1e-3 * ((i // 4) % 2) + 1e-6 * (i % 3)},{(i // 4) % 2}\n"
                   for i in range(40))
    err = _data_error(tmp_path, HEADER + rows, settle_s=5)
    assert err.row == 9 and err.field == "pump" and "settle_s" in err.one_line()
    # with only 5 segments no cycle is left at all, and the message says why
    err = _data_error(tmp_path, HEADER + GOOD_ROWS, settle_s=5)
    assert err.row is None and "no complete cycle" in err.one_line()
    assert "without readings" in err.one_line()


def test_constant_differences_are_refused(tmp_path):
    rows = "".join(f"{i},{1e-3 if (i // 4) % 2 else 0},{(i // 4) % 2}\n" for i in range(20))
    err = _data_error(tmp_path, HEADER + rows)
    assert "scatter is zero" in err.one_line()


@pytest.mark.parametrize("table, key", [
    ({"estimator": "quadratic"}, "estimator"),
    ({"settle_s": -1}, "settle_s"),
    ({"whiteness_level": 1.5}, "whiteness_level"),
    ({"target_relative_uncertainty": 0}, "target_relative_uncertainty"),
    ({"rejection": "sigma"}, "rejection"),
    ({"start_s": 10.0, "stop_s": 5.0}, "stop_s"),
    ({"unit": ""}, "unit"),
])
def test_bad_options_are_spec_errors(tmp_path, table, key):
    (tmp_path / "ok.csv").write_text(HEADER + GOOD_ROWS)
    with pytest.raises(SpecError) as e:
        cycles.evaluate(ctx_for(tmp_path, file="ok.csv", **table))
    assert e.value.field == f"inputs.dV.{key}" and e.value.file == "spec.toml"


def test_file_and_files_and_missing_file(tmp_path):
    (tmp_path / "ok.csv").write_text(HEADER + GOOD_ROWS)
    with pytest.raises(SpecError):
        cycles.evaluate(ctx_for(tmp_path, file="ok.csv", files=["ok.csv"]))
    with pytest.raises(SpecError) as e:
        cycles.evaluate(ctx_for(tmp_path, file="nope.csv"))
    assert "not found" in e.value.one_line()
