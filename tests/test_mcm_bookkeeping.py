"""Bookkeeping of the Monte Carlo method: interval indices, batch counts, the trial cap, the
Sobol grid ends, and the inputs whose t distribution has no variance (issue 18, mutation gaps).

Sources: JCGM 101 §7.7.1 (order statistics of the probabilistically symmetric interval),
§7.9.4 (adaptive batches of M trials), JCGM 100 eq. 16 (variance of a sum of correlated
inputs); the variance of Student's t, ν/(ν − 2) for ν > 2 and infinite for ν ≤ 2 (any
statistics handbook; checked against scipy.stats below); scipy's documentation of
``qmc.Sobol`` (points are k/2^bits). Rules the project chose where no published source exists
are marked *project convention*.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numeric import near
from scipy import stats

from budget.distributions import Distribution
from budget.model import build_model
from budget.propagate import mcm
from budget.propagate.mcm import McmSettings, coverage_intervals, monte_carlo
from budget.propagate.validate import compare_lpu_mcm, numerical_tolerance
from budget.quantity import Quantity


def q(name, dist: Distribution, dof=math.inf) -> Quantity:
    return Quantity(name=name, value=dist.mean, standard_uncertainty=dist.std,
                    distribution=dist, dof=dof)


def run(outputs, quantities, corr=None, progress=None, **kw):
    model = build_model(outputs, quantities={x.name for x in quantities}, constants={})
    corr = np.eye(len(quantities)) if corr is None else corr
    kw.setdefault("seed", 1)
    return monte_carlo(model, quantities, corr, McmSettings(**kw), progress=progress)


# ------------------------------------------------------------------ JCGM 101 §7.7.1 indices
def test_symmetric_interval_order_statistics_by_hand():
    # JCGM 101 §7.7.1: q = ⌊pM + ½⌋; r = (M − q)/2 when M − q is even, else (M − q + 1)/2;
    # interval [y_(r), y_(r+q)] (1-based). The sorted samples are 1 … M, so y_(i) = i.
    y = np.arange(1.0, 11.0)                       # M = 10
    # p = 0.1: q = ⌊1.5⌋ = 1, M − q = 9 odd, r = 5: [y_(5), y_(6)] = [5, 6]
    sym, short = coverage_intervals(y, 0.1)
    assert sym == (5.0, 6.0)
    # shortest: every window of q = 1 has width 1, the first (r* = 1) is taken: [1, 2]
    assert short == (1.0, 2.0)
    # p = 0.5: q = ⌊5.5⌋ = 5, M − q = 5 odd, r = 3: [3, 8]
    assert coverage_intervals(y, 0.5)[0] == (3.0, 8.0)
    # p = 0.6: q = ⌊6.5⌋ = 6, M − q = 4 even, r = 2: [2, 8]
    assert coverage_intervals(y, 0.6)[0] == (2.0, 8.0)


def test_interval_index_clamped_inside_the_sample():
    # project convention: q is kept within 1 … M − 1 so that both order statistics exist even
    # when M < 1/(1 − p) (JCGM 101 §7.2 asks for M ≫ 1/(1 − p); a tiny M is not refused here).
    # M = 3, p = 0.95: ⌊2.85 + ½⌋ = 3 → q = 2, M − q = 1 odd, r = 1: [y_(1), y_(3)]
    y = np.array([1.0, 2.0, 4.0])
    sym, short = coverage_intervals(y, 0.95)
    assert sym == (1.0, 4.0) and short == (1.0, 4.0)
    # M = 10, p = 0.01: ⌊0.6⌋ = 0 → q = 1, r = 5: [5, 6]
    assert coverage_intervals(np.arange(1.0, 11.0), 0.01)[0] == (5.0, 6.0)


# ------------------------------------------------------------------ JCGM 101 §7.9.4 batches
def test_adaptive_cap_runs_exactly_the_whole_batches_that_fit():
    # M = 10⁴ at p = 0.95 (JCGM 101 §7.9.4). ndig = 4 on u = 1 needs δ/5 = 1e-4 (§7.9.2), i.e.
    # some 10⁷ trials: far beyond the cap, so the procedure runs every whole batch the cap
    # allows and stops unstabilised. max_trials = 59 999 holds 5 batches, 60 000 holds 6.
    x = [q("X", Distribution.normal(0.0, 1.0))]
    seen = []
    r = run({"Y": "X"}, x, trials=None, significant_digits=4, max_trials=59_999,
            progress=lambda done, total: seen.append((done, total)))["Y"]
    assert not r.stabilised and r.adaptive
    assert (r.batches, r.trials) == (5, 50_000)
    # progress: trials done so far, never above the cap's whole batches (project convention)
    assert seen[-1][0] == 50_000
    assert [d for d, _ in seen] == sorted(d for d, _ in seen)
    assert all(d <= t <= 59_999 for d, t in seen), seen
    # the total shown from the first batch on: the 10 batches the procedure runs at least
    # (10⁵ trials), capped at max_trials
    assert seen[0][1] == 59_999
    r = run({"Y": "X"}, x, trials=None, significant_digits=4, max_trials=60_000)["Y"]
    assert (r.batches, r.trials) == (6, 60_000)


def test_fixed_run_is_never_stabilised_and_reports_progress():
    # a fixed number of trials is not the adaptive procedure of JCGM 101 §7.9, so never
    # "stabilised"; its accuracy comes from 10 contiguous batches (project convention,
    # budget.propagate.mcm_batches.FIXED_BATCHES), the draws themselves in one stream
    seen = []
    r = run({"Y": "X"}, [q("X", Distribution.normal(0.0, 1.0))], trials=450_000,
            progress=lambda done, total: seen.append((done, total)))["Y"]
    assert (r.batches, r.trials, r.stabilised, r.adaptive) == (10, 450_000, False, False)
    assert r.accuracy is not None and r.accuracy.batches == 10
    # chunks of mcm.CHUNK = 200 000 trials: 200 000, 400 000, 450 000 of 450 000
    assert seen == [(200_000, 450_000), (400_000, 450_000), (450_000, 450_000)]


def test_stop_refused_when_batch_means_disagree():
    # JCGM 101 §7.9.4 e)–h): two batches of M = 10 whose means are −1 and +1 with s = 1 each.
    # u(y) of the 20 values (pooled): ((M − 1)(1 + 1) + M·(1 + 1))/(2M − 1) = 38/19 = 2, u = √2;
    # δ = 0.05 at ndig = 2 (√2 = 14 × 10⁻¹), δ/5 = 0.01; the standard deviation of the average
    # of the two means is 1, so 2·1 > 0.01: not stable. Equal batches are stable.
    apart = [{"Y": (-1.0, 1.0, -3.0, 1.0)}, {"Y": (1.0, 1.0, -1.0, 3.0)}]
    assert mcm._stable(10, apart, ["Y"], 2) is False
    same = [{"Y": (0.0, 1.0, -2.0, 2.0)}, {"Y": (0.0, 1.0, -2.0, 2.0)}]
    assert mcm._stable(10, same, ["Y"], 2) is True


# ------------------------------------------------------------------ Sobol path
def test_sobol_correlated_gaussian_pair_keeps_its_means():
    # JCGM 100 eq. 16: Y = X1 + X2, u = 1 and 2, r = 0.5: u²(Y) = 1 + 4 + 2·0.5·2 = 7;
    # E[Y] = 10 + 5 = 15 exactly for a linear model. RQMC at 2^16 points: the mean's error is
    # far below the pseudo-random standard error √7/256 = 0.0103, which is the bound used.
    qs = [q("X1", Distribution.normal(10.0, 1.0)), q("X2", Distribution.normal(5.0, 2.0))]
    corr = np.array([[1.0, 0.5], [0.5, 1.0]])
    r = run({"Y": "X1 + X2"}, qs, corr=corr, trials=1 << 16, sampling="sobol")["Y"]
    assert r.value == near(15.0, abs=0.0103)
    assert r.standard_uncertainty == near(math.sqrt(7.0), rel=0.01)


class _GridEnds:
    """Stands in for ``scipy.stats.qmc.Sobol``: returns the two extreme points of the 52-bit
    grid, 0 and (2^52 − 1)/2^52 (scipy's Sobol points are k/2^bits, k = 0 … 2^bits − 1)."""

    MAXDIM = 21201

    def __init__(self, d, **kw):
        self.d = d

    def random(self, n):
        u = np.zeros((n, self.d))
        u[1::2] = (2.0 ** 52 - 1) / 2.0 ** 52
        return u


def test_sobol_grid_ends_stay_inside_the_unit_interval(monkeypatch):
    # project convention (mcm.py): a point k/2^52 is moved to (k + ½)/2^52, so both grid ends
    # map to finite normal quantiles, ±Φ⁻¹(1 − 2^-53) = ±8.21 (scipy.stats.norm.isf)
    from scipy.stats import qmc
    monkeypatch.setattr(qmc, "Sobol", _GridEnds)
    r = run({"Y": "X"}, [q("X", Distribution.normal(0.0, 1.0))], trials=4, sampling="sobol")["Y"]
    end = float(stats.norm.isf(2.0 ** -53))
    assert end == near(8.21, rel=1e-3)
    assert r.symmetric == (near(-end, rel=1e-9), near(end, rel=1e-9))


# ------------------------------------------------------------------ t inputs without variance
@pytest.mark.parametrize("dof, infinite", [(1.0, True), (2.0, True), (2.5, False), (3.0, False)])
def test_inputs_without_finite_variance(dof, infinite):
    # Student's t has variance ν/(ν − 2) for ν > 2, none (infinite or undefined) for ν ≤ 2
    # (scipy.stats.t is the reference: inf at ν = 2, nan at ν = 1)
    assert (not np.isfinite(stats.t(dof).var())) == infinite
    xs = [q("A", Distribution.normal(1.0, 0.1), dof=dof),
          q("C", Distribution.normal(2.0, 0.0), dof=dof)]       # a constant is never drawn
    got = mcm.infinite_variance_inputs(xs)
    assert got == (frozenset({"A"}) if infinite else frozenset())
    assert mcm.infinite_variance_inputs(xs, t_for_finite_dof=False) == frozenset()


def test_constant_output_histogram_brackets_the_value():
    # project convention: a constant output (no finite-width bins from its samples) gets one
    # unit either side of its value, so the figure still shows where the value is
    r = run({"Y": "X + 3"}, [q("X", Distribution.normal(2.0, 0.0))], trials=1000)["Y"]
    assert r.value == 5.0
    assert r.histogram_edges[0] < 5.0 < r.histogram_edges[-1]
    assert (r.histogram_edges[0], r.histogram_edges[-1]) == (4.5, 5.5)


# ------------------------------------------------------------------ JCGM 101 §7.9.2 and §8.2
@pytest.mark.parametrize("u", [0.0, -1.0, math.inf, math.nan])
def test_no_tolerance_without_a_positive_finite_u(u):
    # δ = ½·10^l with u = c·10^l (JCGM 101 §7.9.2) exists only for a positive finite u;
    # project convention: 0 otherwise, so that nothing is validated against it
    assert numerical_tolerance(u, 2) == 0.0


def test_validation_holds_at_d_equal_to_delta():
    # JCGM 101 §8.2 (memory): validated when d_low and d_high are both no larger than δ.
    # u = 47 (two digits, l = 0): δ = ½ exactly in binary; y = 0, U = 2, MC interval
    # [−2.5, 2.5]: d_low = |0 − 2 + 2.5| = 0.5 = δ, d_high = |0 + 2 − 2.5| = 0.5 = δ
    v = compare_lpu_mcm(0.0, 2.0, 47.0, -2.5, 2.5, ndig=2)
    assert (v.tolerance, v.d_low, v.d_high, v.validated) == (0.5, 0.5, 0.5, True)
    assert compare_lpu_mcm(0.0, 2.0, 47.0, -2.5, 2.25, ndig=2).validated is True
    assert compare_lpu_mcm(0.0, 2.0, 47.0, -2.5, 2.75, ndig=2).validated is False  # 0.75
    assert compare_lpu_mcm(0.0, 2.0, 47.0, -2.75, 2.5, ndig=2).validated is False


# ------------------------------------------------------------------ small helpers, by hand
def test_fraction_of_trials_inside_a_given_interval():
    # Y = X ~ N(0, 1): the fraction inside ±1.959964 is 0.95 (normal quantile, any table);
    # 2·10⁵ trials: binomial standard error √(0.95·0.05/2e5) = 4.9e-4, bound 5 of them
    x = [q("X", Distribution.normal(0.0, 1.0))]
    model = build_model({"Y": "X"}, quantities={"X"}, constants={})
    z = float(stats.norm.ppf(0.975))
    r = monte_carlo(model, x, np.eye(1), McmSettings(trials=200_000, seed=4),
                    intervals={"Y": (-z, z)})["Y"]
    assert r.interval_probabilities["Y"] == near(0.95, rel=0, abs=5 * 4.9e-4)


def test_power_of_two_and_sobol_chunks():
    # 2^k for k ≥ 0 (definition); Sobol chunks: a power of two with points × coordinates at
    # most 2^22 (project convention, mcm.SOBOL_CELLS), 2^17 points at most
    assert [n for n in range(0, 70) if mcm.is_power_of_two(n)] == [1, 2, 4, 8, 16, 32, 64]
    assert mcm._sobol_chunk(1) == 1 << 17
    assert mcm._sobol_chunk(32) == 1 << 17            # 2^17 · 32 = 2^22: fits exactly
    assert mcm._sobol_chunk(64) == 1 << 16
    assert mcm._sobol_chunk(100) == 1 << 15           # 2^16 · 100 > 2^22 ≥ 2^15 · 100


def test_fixed_run_batches_keep_enough_trials_in_each_tail():
    # project convention (mcm_batches.fixed_batches): 10 batches, fewer when a batch would hold
    # less than ⌈10/(1 − p)⌉ = 200 trials at p = 0.95 (by hand): 1000 trials give 5 batches,
    # 2000 give 10, 399 give 1 (accuracy not estimated); RQMC rounds down to a power of two
    from budget.propagate.mcm_batches import fixed_batches
    assert fixed_batches(1000, 0.95) == 5
    assert fixed_batches(2000, 0.95) == 10
    assert fixed_batches(399, 0.95) == 1
    assert fixed_batches(400, 0.95) == 2                # two batches of 200: the least estimate
    assert fixed_batches(400, 0.95, "sobol") == 2
    assert fixed_batches(1024, 0.95, "sobol") == 4


def test_rqmc_batch_when_the_batch_size_is_already_a_power_of_two():
    # M = ⌈100/(1 − p)⌉ = 16 384 = 2^14 exactly at p = 1 − 100/16 384 = 0.993896484375 (exact
    # in binary, JCGM 101 §7.9.4): RQMC keeps M itself, the next power of two at or above M
    from budget.propagate.mcm_batches import adaptive_batch_size
    p = 1 - 100 / 16_384
    assert adaptive_batch_size(p, "sobol") == 16_384
    assert adaptive_batch_size(p, "random") == 16_384


def test_accuracy_of_each_statistic_is_its_batch_standard_deviation_over_root_h():
    # JCGM 101 §7.9.4 d): the standard deviation of the h batch results divided by √h, for
    # each statistic separately (mean, u, both ends of both intervals). h = 4, by hand:
    # [1, 2, 3, 4]: s = √(5/3), /2 = 0.645497…; [2, 2, 2, 4]: s = 1 → 0.5; [0, 0, 0, 0] → 0;
    # [0, 0, 0, 4]: s = 2 → 1; [0, 0, 2, 2]: s = √(4/3) → 0.577350…; [0, 0, 0, 6]: s = 3 → 1.5
    from budget.propagate.mcm_batches import accuracy_of
    cols = [[1, 2, 3, 4], [2, 2, 2, 4], [0, 0, 0, 0], [0, 0, 0, 4], [0, 0, 2, 2], [0, 0, 0, 6]]
    acc = accuracy_of([tuple(float(c[r]) for c in cols) for r in range(4)])
    assert acc.batches == 4
    assert acc.value == near(math.sqrt(5 / 3) / 2, rel=1e-14)
    assert acc.standard_uncertainty == near(0.5, rel=1e-14)
    assert acc.symmetric == (0.0, near(1.0, rel=1e-14))
    assert acc.shortest == (near(math.sqrt(4 / 3) / 2, rel=1e-14), near(1.5, rel=1e-14))
    assert accuracy_of([tuple(float(c[0]) for c in cols)]) is None   # one batch: unknown


def _batches(sd: float, h: int = 10, m: int = 100, seed: int = 3, shift: float = 0.0):
    """h batches of m normal values rescaled so that all h·m of them have sample sd ``sd``."""
    y = np.random.default_rng(seed).normal(size=h * m)
    y = (y - y.mean()) / y.std(ddof=1) * sd + shift * np.repeat(np.arange(h) % 2, m)
    return y, [y[i * m:(i + 1) * m] for i in range(h)]


@pytest.mark.parametrize("sd, delta", [(0.9935, 0.005), (0.9948, 0.005), (0.9965, 0.05),
                                       (0.0996, 0.005)])
def test_stop_tolerance_from_the_u_of_all_trials(sd, delta):
    # JCGM 101 §7.9.4 f)–g) (memory): δ comes from u(y) of all h·M values. That u is computed
    # here directly, np.std of the 1000 values (ddof = 1); on either side of 0.995, where
    # §7.9.2 switches δ: 0.9935 = 99 × 10⁻² → δ = 0.005, 0.9965 → 1.0 = 10 × 10⁻¹ → δ = 0.05;
    # and just below 0.0995's switch (0.0996 → 10 × 10⁻² → δ = 0.005), where u ≠ 1 so that a
    # pooled u built from s³ instead of s² would move far. 0.9948 sits 5e-4 below the switch:
    # a divisor h·M − 2 instead of h·M − 1 (1/(2hM) = 5e-4 relative) would cross it.
    # The tool records δ/5 (its stricter stop, mcm_batches.VALIDATION_DIVISOR).
    from budget.propagate.mcm_batches import batch_stats, stable
    y, parts = _batches(sd)
    assert float(np.std(y, ddof=1)) == near(sd, rel=1e-12)
    assert numerical_tolerance(sd, 2) == delta
    used: dict = {}
    stable(100, [{"Y": batch_stats(b, 0.95)} for b in parts], ["Y"], 2, used=used)
    assert used["Y"] == near(delta / 5, rel=1e-12)


def test_stop_tolerance_recorded_for_every_output_even_after_one_fails():
    # the δ/5 of each output is recorded (it goes into the result's stop_tolerance), also
    # after an earlier output has failed the test: A's batch means alternate by 10 (2·s of
    # its mean ≫ δ/5), B is the sample of the test above with δ/5 = 0.01
    from budget.propagate.mcm_batches import batch_stats, stable
    _, a = _batches(1.0, shift=10.0)
    _, b = _batches(0.9965)
    stats = [{"A": batch_stats(x, 0.95), "B": batch_stats(z, 0.95)} for x, z in zip(a, b)]
    used: dict = {}
    assert stable(100, stats, ["A", "B"], 2, used=used) is False
    assert set(used) == {"A", "B"}
    assert used["B"] == near(0.05 / 5, rel=1e-12)
    assert stable(100, stats, ["A", "B"], 2) is False          # without recording: same answer


def test_stop_tolerance_recorded_when_the_cap_stops_after_two_batches():
    # max_trials = 2M (M = 10⁴ at p = 0.95, JCGM 101 §7.9.4): the cap ends the procedure after
    # two batches, before the 10 the stop test needs (project convention); the δ/5 that the
    # two batches give is still recorded: u ≈ 2 (N(0, 2²)), any u in [0.995, 9.95) has
    # δ = 0.05 at ndig = 2 (§7.9.2), δ/5 = 0.01. One batch has no s: nothing recorded (0).
    x = [q("X", Distribution.normal(0.0, 2.0))]
    r = run({"Y": "X"}, x, trials=None, max_trials=20_000)["Y"]
    assert (r.batches, r.stabilised) == (2, False)
    assert r.standard_uncertainty == near(2.0, abs=0.1)
    assert r.stop_tolerance == near(0.01, rel=1e-12)
    r = run({"Y": "X"}, x, trials=None, max_trials=19_999)["Y"]
    assert (r.batches, r.stop_tolerance) == (1, 0.0)
    # with the linear u_c = 0.2 given: δ(u_c) = 0.005 is the smaller, δ/5 = 0.001
    model = build_model({"Y": "X"}, quantities={"X"}, constants={})
    r = monte_carlo(model, x, np.eye(1), McmSettings(trials=None, max_trials=20_000, seed=1),
                    linear_u={"Y": 0.2})["Y"]
    assert r.stop_tolerance == near(0.001, rel=1e-12)


def test_small_sample_histogram_spans_every_sample():
    # project convention (mcm._histogram): up to 2000 trials the histogram spans the whole
    # sorted sample, from its first to its last value, so every trial is counted; a range no
    # finite bins fit (1e308 ± ½ is 1e308) gives an empty histogram, never a failed run
    y = np.sort(np.random.default_rng(1).normal(size=500))
    counts, edges = mcm._histogram(y)
    assert int(counts.sum()) == 500 and (edges[0], edges[-1]) == (y[0], y[-1])
    counts, edges = mcm._histogram(np.full(10, 1e308))
    assert (counts.size, edges.size) == (0, 0)


def test_stop_tolerance_is_the_smaller_of_the_two_deltas():
    # δ = min(δ(u_MC), δ(u_c)) (module docstring of mcm_batches, project convention stricter
    # than JCGM 101 §7.9.4, which uses δ(u_MC)): u_MC = 0.9935 → δ = 0.005 (§7.9.2); a linear
    # δ of 0.05 leaves 0.005, one of 0.0005 replaces it; δ/5 recorded
    from budget.propagate.mcm_batches import batch_stats, stable
    _, parts = _batches(0.9935)
    stats = [{"Y": batch_stats(b, 0.95)} for b in parts]
    for lin, expected in ((0.05, 0.005), (0.0005, 0.0005)):
        used: dict = {}
        stable(100, stats, ["Y"], 2, linear={"Y": lin}, used=used)
        assert used["Y"] == near(expected / 5, rel=1e-12)


def test_shortest_interval_stop_tests_both_of_its_ends():
    # JCGM 101 §7.9.4 e)–h): 2·s of both ends of the reported interval within δ/5. Batch
    # statistics (mean, u, symmetric low/high, shortest low/high) by hand: all equal except the
    # shortest interval's low end, which alternates by ±1 (2·s of its average ≫ δ/5 = 0.01 at
    # u = 2, §7.9.2). The symmetric interval is stable; the shortest is not, by its low end.
    from budget.propagate.mcm_batches import stable
    stats = [{"Y": (0.0, 2.0, -3.9, 3.9, -3.9 + (-1.0) ** i, 3.9)} for i in range(10)]
    assert stable(10_000, stats, ["Y"], 2, interval="symmetric") is True
    assert stable(10_000, stats, ["Y"], 2, interval="shortest") is False
    high = [{"Y": (0.0, 2.0, -3.9, 3.9, -3.9, 3.9 + (-1.0) ** i)} for i in range(10)]
    assert stable(10_000, high, ["Y"], 2, interval="shortest") is False
