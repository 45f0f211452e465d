"""The on/off Type A statistics on inputs whose answer is known by hand (issue 18, mutation gaps).

Checks, each against a source outside the code under test:

* the white-noise moments of the cycle differences of a regular record (budget/stats/onoff.py
  module docstring, derivation repeated here): C tridiagonal with 3/2 and 1/4 (units of the
  segment variance v = 1/(2kΔt)), so 1ᵀC1 = v(2n − ½), tr(PC) = 3nv/2 − v(2n − ½)/n;
* the Allan variance of block means of a stationary series, computed here as the quadratic
  form ½·aᵀΣa of the Toeplitz autocovariance Σ (a = the difference of two adjacent block means,
  the definition of the Allan variance, NIST SP 1065 §5.2.2 (memory)) — independent of the
  closed form in onoff.avar_model;
* the overlapping Allan deviation of a series from allantools (open reference library);
* SP 1065 Table 5 equivalent degrees of freedom (white FM and flicker FM, as quoted in
  budget/stats/allan.py) and the F distribution's upper tail from scipy.stats;
* Welch–Satterthwaite (JCGM 100 G.4.1) for the ν of a white part plus a floor;
* the effective number of Zhang (Metrologia 43, S276, 2006): n/[1 + 2Σ(1 − k/n)r_k], r_k the
  biased sample autocorrelation, computed here with numpy.correlate;
* the measurement-time plan: u²(n') = a·Var₁·n/n' + b (the Allan floor model, weighted by w
  against the white part as typea.py step 5 states) or u² ∝ 1/n (white), solved for n' by
  hand.

Where the rule is one the project chose (the longest octave m ≤ n/4, the autocorrelation
correction from 4 differences on), it is marked *project convention*.
"""

from __future__ import annotations

import math
from types import SimpleNamespace

import allantools
import numpy as np
import pytest
from numeric import near
from scipy import stats

from budget.errors import ComputationError
from budget.stats import allan, onoff, typea

K = 10        # readings kept per segment
DT = 1.0      # s between readings
V = 1.0 / (2 * K * DT)   # segment-mean variance per unit S² (onoff.py: 1/(2kΔt))


def regular(n: int):
    """Differences of a noise-free regular record with n on segments (2n + 1 segments)."""
    segs = 2 * n + 1
    t = np.arange(segs * K) * DT
    on = (t // (K * DT)).astype(int) % 2 == 1
    seg = onoff.segment(t, np.zeros_like(t), on, 0.0)
    return onoff.differences(seg, "linear")


def avar_by_quadratic_form(gamma, m: int) -> float:
    """½·E[(ȳ₂ − ȳ₁)²] for adjacent means of m values of a series with autocovariance gamma."""
    size = 2 * m
    lag = np.abs(np.subtract.outer(np.arange(size), np.arange(size)))
    g = np.zeros(size)
    g[:min(len(gamma), size)] = gamma[:size]
    sigma = g[lag]
    a = np.concatenate([-np.ones(m), np.ones(m)]) / m
    return 0.5 * float(a @ sigma @ a)


def sp1065_white_edf(n: int, m: int) -> float:
    # SP 1065 Table 5, white FM, N = n + 1 phase points (as quoted in budget/stats/allan.py)
    big_n = n + 1
    return (3 * (big_n - 1) / (2 * m) - 2 * (big_n - 2) / big_n) * 4 * m * m / (4 * m * m + 5)


def sp1065_flicker_edf(n: int, m: int) -> float:
    big_n = n + 1                                     # m ≥ 2 branch of SP 1065 Table 5
    return 5 * big_n ** 2 / (4 * m * (big_n + 3 * m))


# ------------------------------------------------------------------ white-noise model
@pytest.mark.parametrize("n", [8, 64])
def test_white_model_of_a_regular_record_by_hand(n):
    model = onoff.white_model(regular(n))
    one_c_one = V * (2 * n - 0.5)                     # n·3/2 + 2(n − 1)·1/4, times v
    tr_pc = 1.5 * n * V - one_c_one / n
    # tr((PC)²) = tr(C²) − (2/n)‖C1‖² + (1ᵀC1/n)²; C² summed: n(9/4) + 2(n − 1)(1/16), C1 has
    # 2 at the interior rows and 7/4 at the two ends
    tr_c2 = V * V * (n * 9 / 4 + 2 * (n - 1) / 16)
    c1_sq = V * V * ((n - 2) * 4 + 2 * (7 / 4) ** 2)
    tr_pc2 = tr_c2 - 2 / n * c1_sq + (one_c_one / n) ** 2
    assert model.var_mean == near(one_c_one / n ** 2, rel=1e-12)
    assert model.e_s2 == near(tr_pc / (n - 1), rel=1e-12)
    assert model.factor == near(one_c_one / n ** 2 / (tr_pc / (n - 1)), rel=1e-12)
    assert model.dof == near(tr_pc ** 2 / tr_pc2, rel=1e-12)
    assert model.gamma == near([1.5 * V, 0.25 * V, 0.0, 0.0], rel=1e-12, abs=1e-15)


@pytest.mark.parametrize("gamma", [[1.5, 0.25, 0.0, 0.0], [2.0, 0.7, 0.3, 0.1],
                                   [1.0, -0.4, 0.2, -0.05]])
def test_avar_model_equals_the_quadratic_form(gamma):
    m = np.array([1, 2, 3, 4, 8, 16])
    got = onoff.avar_model(np.array(gamma), m)
    want = [avar_by_quadratic_form(np.array(gamma), int(k)) for k in m]
    assert got == near(want, rel=1e-12)


# ------------------------------------------------------------------ the Allan ratio verdict
def test_verdict_statistic_edf_and_p_value_against_references():
    # n = 64 differences: the longest octave m ≤ n/4 is 16 (project convention m_L ≤ n/4)
    n = 64
    diff = regular(n)
    model = onoff.white_model(diff)
    d = np.random.default_rng(18).normal(size=n)
    res = typea.analyse(d, model)
    v = res.verdict
    assert v.testable and v.m == 16
    # overlapping Allan variances at m = 1 and 16 from allantools (rate 1: τ = m)
    _, adev, _, _ = allantools.oadev(d, rate=1.0, data_type="freq", taus=np.array([1.0, 16.0]))
    # white-noise model A(m) = v·(2m − ¾)/m² (regular record, derived above; v cancels):
    # R = AVAR(16)/(AVAR(1)/A(1)·A(16))
    a_1, a_16 = 2 - 0.75, (2 * 16 - 0.75) / 16 ** 2
    ratio = adev[1] ** 2 / (adev[0] ** 2 / a_1 * a_16)
    assert v.statistic == near(ratio, rel=1e-9)
    assert v.edf == near(sp1065_white_edf(n, 16), rel=1e-12)
    assert v.edf_reference == near(sp1065_white_edf(n, 1), rel=1e-12)
    assert v.p_value == near(float(stats.f.sf(ratio, v.edf, v.edf_reference)), rel=1e-9)


@pytest.mark.parametrize("n, m_l", [(8, 2), (31, 4), (32, 8), (64, 16), (65, 16)])
def test_longest_octave_is_the_last_power_of_two_within_a_quarter(n, m_l):
    # project convention (typea.py): m_L is the largest octave m = 2^j with m ≤ n/4
    d = np.random.default_rng(n).normal(size=n)
    assert typea.analyse(d, onoff.white_model(regular(n))).verdict.m == m_l


# ------------------------------------------------------------------ the Allan floor fit
def test_allan_floor_fit_recovers_a_and_b_and_satterthwaite_dof():
    # AVAR(m) = a·A(m) + b exactly (A from the quadratic form): the weighted non-negative fit
    # must return a and b; u² = a·Var₁(d̄) + b; ν by Welch–Satterthwaite (JCGM 100 G.4.1) from
    # ν_w for the white part and the SP 1065 flicker edf at m_L for b.
    n = 64
    model = onoff.white_model(regular(n))
    a, b = 3.0e-6, 2.0e-8                              # reading² s and reading² (invented)
    m = np.array([1, 2, 4, 8, 16])
    avar = np.array([a * avar_by_quadratic_form(model.gamma, int(k)) + b for k in m])
    curve = allan.AllanCurve(kind="oadev", m=m, deviation=np.sqrt(avar),
                             terms=n - 2 * m + 1, n=n)
    fit = typea._allan_fit(curve, model, 16, n)
    assert fit.a == near(a, rel=1e-9)
    assert fit.b == near(b, rel=1e-9)
    white2 = a * model.var_mean
    u2 = white2 + b
    assert fit.u == near(math.sqrt(u2), rel=1e-9)
    nu = u2 ** 2 / (white2 ** 2 / model.dof + b ** 2 / sp1065_flicker_edf(n, 16))
    assert fit.dof == near(nu, rel=1e-9)
    # fit only up to m = 8: the floor's ν is the edf at 8
    fit8 = typea._allan_fit(curve, model, 8, n)
    assert list(fit8.m) == [1, 2, 4, 8]
    nu8 = u2 ** 2 / (white2 ** 2 / model.dof + b ** 2 / sp1065_flicker_edf(n, 8))
    assert fit8.dof == near(nu8, rel=1e-9)


def test_allan_floor_fit_weights_are_the_inverse_chi_square_variances():
    # A noisy curve: AVAR_i = (a·A_i + b)(1 + ε_i), ε invented, ±4…6 %. The fit weights each
    # point by 1/var(AVAR_i) with var(AVAR) = 2·AVAR²/edf (σ̂² ~ σ²·χ²_edf/edf, NIST SP 1065
    # §5.2 / Table 5 edf (memory)), AVAR taken from the fitted values and the edf the smaller
    # of SP 1065's white-FM and flicker-FM values (project convention: the noise type is not
    # known). Reference: numpy.polyfit with w = 1/σ (its documented weighting of the unsquared
    # residuals), re-weighted to its fixed point. Unweighted (OLS) and inverse weights give a
    # and b 2 % … 120 % away, so the check tells the weightings apart.
    n = 64
    model = onoff.white_model(regular(n))
    a, b = 3.0e-6, 2.0e-8                              # reading² s and reading² (invented)
    m = np.array([1, 2, 4, 8, 16])
    x = np.array([avar_by_quadratic_form(model.gamma, int(k)) for k in m])
    y = (a * x + b) * (1.0 + np.array([0.06, -0.04, 0.05, -0.06, 0.04]))
    curve = allan.AllanCurve(kind="oadev", m=m, deviation=np.sqrt(y), terms=n - 2 * m + 1, n=n)
    flicker_1 = 2 * (n - 1) ** 2 / (2.3 * (n + 1) - 4.9)   # SP 1065 Table 5, m = 1, N = n + 1
    edf = np.array([min(sp1065_white_edf(n, int(k)),
                        sp1065_flicker_edf(n, int(k)) if k >= 2 else flicker_1) for k in m])
    yhat, passes = y.copy(), []
    for _ in range(50):
        slope, icept = np.polyfit(x, y, 1, w=1.0 / (np.sqrt(2.0 / edf) * yhat))
        yhat = slope * x + icept
        passes.append((slope, icept))
    a_ref, b_ref = passes[-1]
    # typea.py re-weights three times; the reference's own third pass is within 1e-4 of its
    # fixed point here (asserted), so 1e-4 is the tolerance of the comparison
    assert passes[2][0] == near(a_ref, rel=1e-4) and passes[2][1] == near(b_ref, rel=1e-4)
    fit = typea._allan_fit(curve, model, 16, n)
    assert fit.a == near(a_ref, rel=1e-4)
    assert fit.b == near(b_ref, rel=1e-4)
    a_ols, b_ols = np.polyfit(x, y, 1)
    assert abs(b_ols / b_ref - 1) > 0.02 and abs(a_ols / a_ref - 1) > 0.01   # the check bites


def test_allan_floor_without_a_floor_keeps_the_white_dof():
    # b = 0: Welch–Satterthwaite gives back ν_w (JCGM 100 G.4.1 with one component)
    n = 64
    model = onoff.white_model(regular(n))
    m = np.array([1, 2, 4, 8, 16])
    avar = np.array([2.0 * avar_by_quadratic_form(model.gamma, int(k)) for k in m])
    curve = allan.AllanCurve(kind="oadev", m=m, deviation=np.sqrt(avar),
                             terms=n - 2 * m + 1, n=n)
    fit = typea._allan_fit(curve, model, 16, n)
    assert fit.b == near(0.0, abs=1e-12 * 2.0)         # a non-negative fit of exact data
    assert fit.dof == near(model.dof, rel=1e-6)


# ------------------------------------------------------------------ the proportionate widening
def test_weight_is_zero_when_the_record_passes():
    # typea.evidence_weight docstring (project convention): w = 0 when p ≥ level or no p
    assert typea.evidence_weight(None, 0.05) == 0.0
    assert typea.evidence_weight(0.2, 0.05) == 0.0 and typea.evidence_weight(1.0, 0.05) == 0.0
    assert typea.evidence_weight(0.005, 0.05) == near(1.0, rel=1e-12)   # a decade below: 1


@pytest.mark.parametrize("seed, capped", [(30, False), (50, True)])
def test_proportionate_widening_dof_is_welch_satterthwaite(seed, capped):
    # white noise plus a random walk of 0.15 per difference (invented; seeds chosen so that
    # the record is rejected with 0 < w < 1). Project convention (typea.py step 5):
    # u² = (1 − w)·u_w² + w·u_full²; its ν by Welch–Satterthwaite (JCGM 100 G.4.1) from the
    # two parts, ν = u⁴/[((1 − w)u_w²)²/ν_w + (w·u_full²)²/ν_full], never above ν_w (project
    # convention); seed 50 gives 78.6 > ν_w = 59.8, so there the cap applies.
    g = np.random.default_rng(seed)
    d = g.normal(size=64) + 0.15 * np.cumsum(g.normal(size=64))
    r = typea.analyse(d, onoff.white_model(regular(64)))
    assert 0.0 < r.weight < 1.0 and r.method != "white"
    part_w, part_f = (1 - r.weight) * r.u_white ** 2, r.weight * r.u_full ** 2
    assert r.u ** 2 == near(part_w + part_f, rel=1e-12)
    nu = (part_w + part_f) ** 2 / (part_w ** 2 / r.dof_white + part_f ** 2 / r.dof_full)
    assert (nu > r.dof_white) is capped
    assert r.dof == near(min(nu, r.dof_white), rel=1e-12)


# ------------------------------------------------------------------ autocorrelation option
def test_autocorrelation_option_dof_is_n_eff_minus_one():
    # a linear trend of 16 differences: not white; its positive autocorrelation widens most.
    # Zhang 2006: n_eff = n/[1 + 2Σ_{k=1}^{K}(1 − k/n)r_k], summed while r_k > 0 up to n/4
    # (truncation rule of budget/stats/autocorr.py, project convention); ν = n_eff − 1.
    n = 16
    d = np.arange(n, dtype=float)
    model = onoff.white_model(regular(n))
    res = typea.analyse(d, model)
    assert not res.verdict.white and res.method == "autocorrelation"
    x = d - d.mean()
    r = np.correlate(x, x, "full")[n - 1:] / (x @ x)
    k = 1
    total = 0.0
    while k <= n // 4 and r[k] > 0:
        total += (1 - k / n) * r[k]
        k += 1
    n_eff = n / (1 + 2 * total)
    assert res.acorr.n_eff == near(n_eff, rel=1e-12)
    # the lag-1 autocorrelation reported beside it, and the white model's ρ_1 = (1/4)/(3/2)
    # = 1/6 for a regular record (onoff.py docstring, derived above)
    assert res.r1 == near(r[1], rel=1e-12)
    assert res.r1_model == near(1 / 6, rel=1e-12)
    assert res.dof == near(n_eff - 1.0, rel=1e-12)
    s = d.std(ddof=1)
    assert res.u == near(s / math.sqrt(n_eff), rel=1e-12)


def test_autocorrelation_correction_from_four_differences_on():
    # project convention: the Zhang/Witt correction needs at least 4 values (autocorr.py);
    # with 4 it is reported (not used for the uncertainty: fewer than 8 are not testable)
    model = onoff.white_model(regular(4))
    d = np.array([1.0, 2.0, 4.0, 3.0])
    res = typea.analyse(d, model)
    assert res.acorr is not None and res.acorr.n == 4
    assert res.u_acorr == near(d.std(ddof=1) / math.sqrt(res.acorr.n_eff), rel=1e-12)
    assert not res.verdict.testable and res.method == "white"
    assert typea.analyse(d[:3], onoff.white_model(regular(3))).acorr is None


# ------------------------------------------------------------------ planning
def test_planning_allan_floor_by_hand():
    # u²(n') = a·Var₁(d̄)·n/n' + b; with a·Var₁·n = 2·0.03125·64 = 4 (reading²), b = 0.01 and
    # the target u_t = 0.2·|mean| = 0.2: n' = 4/(0.04 − 0.01) = 133.33 cycles; 20 s a cycle.
    # weight w = 1 (typea step 5: the full widening), so the white-noise u_w does not enter
    res = SimpleNamespace(mean=1.0, method="allan-floor", n=64, u=0.3, weight=1.0,
                          u_white=0.25, fit=SimpleNamespace(a=2.0, b=0.01))
    model = SimpleNamespace(var_mean=0.03125)
    plan = typea.planning(res, model, 0.2, cycle_s=20.0, used_s=1280.0)
    assert plan["cycles_needed"] == near(4.0 / 0.03, rel=1e-12)
    # w = 1/2: u²(n') = [½u_w² + ½a·Var₁]·n/n' + ½b, with u_w²·n = 0.0625·64 = 4 as well:
    # n' = 4/(0.04 − 0.005) = 114.29 cycles
    half = typea.planning(SimpleNamespace(**{**vars(res), "weight": 0.5}), model, 0.2,
                          cycle_s=20.0, used_s=1280.0)
    assert half["cycles_needed"] == near(4.0 / 0.035, rel=1e-12)
    assert plan["time_needed_s"] == near(20.0 * 4.0 / 0.03, rel=1e-12)
    assert plan["time_needed_h"] == near(20.0 * 4.0 / 0.03 / 3600.0, rel=1e-12)
    assert plan["reached"] is False                 # u = 0.3 > 0.2
    assert plan["target_standard_uncertainty"] == near(0.2, rel=1e-15)
    # a floor at the target itself can never be averaged away: b = u_t² = 0.25² (exact in
    # binary), and one above it neither
    for b in (0.0625, 0.07):
        res.fit = SimpleNamespace(a=2.0, b=b)
        plan = typea.planning(res, model, 0.25, 20.0, 1280.0)
        assert plan["cycles_needed"] is None and "unreachable" in plan["text"]
        assert plan["reached"] is False


def test_planning_white_by_hand_and_zero_mean():
    # u² ∝ 1/n: n' = n·(u/u_t)² = 50·(0.3/(0.1·2))² = 112.5 cycles
    res = SimpleNamespace(mean=-2.0, method="white", n=50, u=0.3, fit=None)
    plan = typea.planning(res, SimpleNamespace(var_mean=1.0), 0.1, cycle_s=4.0, used_s=200.0)
    assert plan["cycles_needed"] == near(112.5, rel=1e-12)
    assert plan["time_needed_s"] == near(450.0, rel=1e-12)
    assert plan["reached"] is False
    reached = typea.planning(SimpleNamespace(mean=1.0, method="white", n=50, u=0.05, fit=None),
                             SimpleNamespace(var_mean=1.0), 0.1, 4.0, 200.0)
    assert reached["reached"] is True and reached["cycles_needed"] == near(12.5, rel=1e-12)
    zero = typea.planning(SimpleNamespace(mean=0.0, method="white", n=50, u=0.3, fit=None),
                          SimpleNamespace(var_mean=1.0), 0.1, 4.0, 200.0)
    assert zero["cycles_needed"] is None and "undefined" in zero["text"]
    assert zero["reached"] is False
    # u exactly at the target (0.25 = 0.25·1, exact in binary) counts as reached
    at = typea.planning(SimpleNamespace(mean=1.0, method="white", n=50, u=0.25, fit=None),
                        SimpleNamespace(var_mean=1.0), 0.25, 4.0, 200.0)
    assert at["reached"] is True and at["cycles_needed"] == near(50.0, rel=1e-12)


# ------------------------------------------------------------------ segments and pooling
def test_a_last_segment_with_one_kept_reading_is_used():
    # project convention (onoff.usable_on_segments): an end segment cut short by the record's
    # end is used while the settle cut leaves it at least one reading, dropped when none.
    # Segments of K = 10 readings every 1 s, settle 5 s: readings 5 … 9 of a segment are kept.
    def record(last_len):
        segs = 2 * 4 + 1                                    # off, on, …, off: 4 on segments
        t = np.arange((segs - 1) * K + last_len) * DT
        on = (t // (K * DT)).astype(int) % 2 == 1
        seg = onoff.segment(t, np.zeros_like(t), on, 5.0)
        return seg, onoff.differences(seg, "linear")

    seg, diff = record(6)                                   # last off segment: 6 readings
    assert seg.kept[-1] == 1 and diff.n == 4
    seg, diff = record(5)                                   # 5 readings: none kept
    assert seg.kept[-1] == 0 and diff.n == 3


def test_pooled_records_have_a_block_diagonal_weight_matrix():
    # by construction: no segment is shared between records, so W of the pooled differences is
    # block-diagonal and the second record's segment indices follow the first record's
    from scipy.linalg import block_diag
    a, b = regular(3), regular(2)
    pooled = onoff.stack([a, b])
    assert pooled.matrix().toarray() == near(block_diag(a.matrix().toarray(),
                                                        b.matrix().toarray()), rel=0, abs=0)
    assert list(pooled.involved) == list(a.involved) + list(b.involved + len(a.v))


# ------------------------------------------------------------------ the scale of a pump current
def test_differences_in_amperes_keep_every_digit():
    # the same record in V (≈ 1e-3) and as a current in A (≈ 1e-10, × 1e-7): every result
    # scales with the unit (a change of unit is a multiplication, SI Brochure §2.3.3), and a
    # scatter of 1e-15 A is a scatter, not float noise (eps·|d| ≈ 2e-26 A)
    rng = np.random.default_rng(7)
    n = 64
    d = 1e-3 + 1e-8 * rng.normal(size=n)
    model = onoff.white_model(regular(n))
    volts = typea.analyse(d, model)
    amps = typea.analyse(d * 1e-7, model)
    assert amps.mean == near(volts.mean * 1e-7, rel=1e-14)
    assert amps.u == near(volts.u * 1e-7, rel=1e-12)
    assert amps.dof == near(volts.dof, rel=1e-12)
    assert amps.verdict.p_value == near(volts.verdict.p_value, rel=1e-9)


def test_all_zero_differences_are_refused():
    # project convention: differences with no scatter (all equal, here all 0) have no Type A
    # uncertainty; refused rather than reported as u = 0
    with pytest.raises(ComputationError, match="scatter is zero"):
        typea.analyse(np.zeros(16), onoff.white_model(regular(16)))


def test_segment_means_by_hand():
    # onoff.segment: one mean per run of equal on/off states, over the readings kept after
    # the settle cut (module docstring). Readings far from 0 (1e9 + …, invented) so that the
    # means keep their offset: [10, 11, 12] + 1e9 off, then [20, 21, 22] + 1e9 on, settle 1 s
    # keeps the last two of each: means 1e9 + 11.5 and 1e9 + 21.5 (by hand)
    t = np.arange(6.0)
    r = 1e9 + np.array([10.0, 11.0, 12.0, 20.0, 21.0, 22.0])
    on = np.array([False, False, False, True, True, True])
    seg = onoff.segment(t, r, on, 1.0)
    assert seg.kept.tolist() == [2, 2] and seg.on.tolist() == [False, True]
    assert seg.mean.tolist() == [1e9 + 11.5, 1e9 + 21.5]
    # the shortest record, 2 readings (one each): accepted ("at least 2", onoff.segment)
    two = onoff.segment(np.array([0.0, 1.0]), np.array([3.0, 5.0]), np.array([False, True]), 0.0)
    assert two.mean.tolist() == [3.0, 5.0]
    with pytest.raises(ComputationError, match="at least 2 readings"):
        onoff.segment(np.array([0.0]), np.array([3.0]), np.array([True]), 0.0)
