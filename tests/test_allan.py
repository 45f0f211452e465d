"""Allan, overlapping Allan and modified Allan deviations (budget.stats.allan).

Outside references: NIST SP 1065 (Riley, Handbook of Frequency Stability Analysis, 2008), its
1000-point test data set and published values (copied into shared/REFERENCES.md); the
general-purpose `allantools` package as an independent oracle (never imported by budget/).
"""

import math

import allantools
import numpy as np
import pytest
from numeric import near

from budget.errors import ComputationError
from budget.stats import allan


def sp1065_data() -> np.ndarray:
    # NIST SP 1065 test set: x0 = 1234567890, x_{n+1} = 16807·x_n mod 2147483647,
    # data x_n/2147483647 for n = 0..999 (the seed itself is the first point).
    x = [1234567890]
    for _ in range(999):
        x.append(16807 * x[-1] % 2147483647)
    return np.array(x, dtype=float) / 2147483647


# NIST SP 1065 published values (REFERENCES.md), fractional-frequency interpretation, m = 1, 10, 100
SP1065 = {
    "adev": [2.922319e-1, 9.965736e-2, 3.897804e-2],
    "oadev": [2.922319e-1, 9.159953e-2, 3.241343e-2],
    "mdev": [2.922319e-1, 6.172376e-2, 2.170921e-2],
}


def half_last_digit(v: float) -> float:
    # 7 significant digits published: tolerance is half a unit in the 7th digit
    return 0.5 * 10 ** (math.floor(math.log10(abs(v))) - 6)


@pytest.mark.parametrize("kind", ["adev", "oadev", "mdev"])
def test_sp1065_published_values(kind):
    curve = allan.allan_curve(sp1065_data(), kind, [1, 10, 100])
    for got, want in zip(curve.deviation, SP1065[kind]):
        assert abs(got - want) <= half_last_digit(want), (kind, got, want)


def test_sp1065_data_set_itself():
    # SP 1065: the seed is the first point; a value well known for this generator
    # (Park–Miller "minimal standard"): from x0 = 1, x_10000 = 1043618065 (Park & Miller,
    # CACM 31, 1192, 1988 — memory). Checks that the generator above is the right one.
    x = 1
    for _ in range(10000):
        x = 16807 * x % 2147483647
    assert x == 1043618065
    assert sp1065_data()[0] == near(1234567890 / 2147483647, rel=1e-15)


def _oracle(kind, y, m):
    fn = {"adev": allantools.adev, "oadev": allantools.oadev, "mdev": allantools.mdev}[kind]
    taus, dev, _, _ = fn(y, rate=1.0, data_type="freq", taus=np.asarray(m, dtype=float))
    # allantools stops its ADEV one octave earlier (it wants more than 2 blocks); compare
    # on the factors both compute
    assert np.array_equal(taus, np.asarray(m, dtype=float)[: len(taus)])
    assert len(taus) >= len(m) - 1
    return dev


@pytest.mark.parametrize("kind", ["adev", "oadev", "mdev"])
@pytest.mark.parametrize("noise", ["white", "random-walk"])
def test_agrees_with_allantools_on_random_data(kind, noise):
    rng = np.random.default_rng(20261201)
    y = rng.normal(size=5000)
    if noise == "random-walk":
        y = np.cumsum(y)
    m = allan.octave_factors(len(y), kind)
    ref = _oracle(kind, y, m)
    ours = allan.allan_curve(y, kind).deviation[: len(ref)]
    # same formulas, different order of summation: agreement to rounding error
    np.testing.assert_allclose(ours, ref, rtol=1e-9)


def test_large_offset_costs_no_precision():
    # Allan variances are built from differences, so a constant offset changes nothing
    # (definition, SP 1065 eq. 6/11/14); we subtract the mean before the cumulative sum.
    rng = np.random.default_rng(7)
    y = rng.normal(size=4000) * 1e-9
    ref = _oracle("oadev", y, allan.octave_factors(len(y)))
    shifted = allan.oadev(y + 1.0).deviation
    # y + 1.0 itself rounds each value by up to 1.1e-16 (half an ulp of 1.0), i.e. ~1e-7 of
    # the 1e-9 noise (derivation); 1e-6 allows that input rounding and nothing more
    np.testing.assert_allclose(shifted, ref, rtol=1e-6)


def test_white_noise_allan_variance_is_sigma2_over_m():
    # For white (fractional-frequency) noise of variance σ², AVAR(m) = σ²/m (SP 1065 §5.2,
    # white FM: σ_y(τ) ∝ τ^(−1/2)); tolerance from the SP 1065 edf of the overlapping variance:
    # relative sd of the variance ≈ √(2/edf), checked at 5 sd.
    rng = np.random.default_rng(3)
    n = 200_000
    y = rng.normal(size=n) * 2.0
    curve = allan.oadev(y, [1, 4, 16, 64])
    edf = allan.edf_white_fm(n, curve.m)
    ratio = curve.deviation ** 2 / (4.0 / curve.m)
    assert np.all(np.abs(ratio - 1) < 5 * np.sqrt(2 / edf))


def test_octave_factors_respect_the_term_count():
    # Definitions (module docstring, SP 1065): OADEV needs N − 2m + 1 ≥ 1, MDEV N − 3m + 2 ≥ 1,
    # ADEV two blocks.
    assert allan.octave_factors(1000, "oadev").tolist() == [1, 2, 4, 8, 16, 32, 64, 128, 256]
    assert allan.octave_factors(1024, "oadev")[-1] == 512
    assert allan.octave_factors(1000, "mdev")[-1] == 256          # 3·256 = 768 ≤ 1001
    assert allan.octave_factors(767, "mdev")[-1] == 256           # 3·256 = 768 ≤ 768
    assert allan.octave_factors(766, "mdev")[-1] == 128           # 3·256 = 768 > 767
    c = allan.oadev(np.arange(1024.0) % 3, [512])
    assert c.terms.tolist() == [1]


def test_edf_formulas_match_allantools():
    # SP 1065 Table 5 as coded in allantools.ci.edf_simple (N = number of phase points).
    for n in (100, 1000, 10_000):
        for m in (1, 2, 8, 32):
            assert allan.edf_white_fm(n, m) == near(
                allantools.edf_simple(n + 1, m, 0), rel=1e-12)
            if m >= 2:
                assert allan.edf_flicker_fm(n, m) == near(
                    allantools.edf_simple(n + 1, m, -1), rel=1e-12)


def test_edf_of_short_records_and_the_floor_of_one():
    # few points: SP 1065 Table 5 (allantools.edf_simple) gives edf between 1 and 2, which is
    # kept as it is; below 1 the project clips to 1 (project convention: a chi-square with
    # fewer than one degree of freedom is not used for an interval)
    n = 8                                                  # N = 9 phase points
    assert allan.edf_flicker_fm(n, 4) == near(allantools.edf_simple(n + 1, 4, -1), rel=1e-12)
    assert allan.edf_white_fm(n, 4) == near(allantools.edf_simple(n + 1, 4, 0), rel=1e-12)
    assert 1.0 < float(allan.edf_flicker_fm(n, 4)) < 2.0    # 5·81/(16·21) = 1.205
    assert allantools.edf_simple(n + 1, 16, -1) < 1.0        # 5·81/(64·57) = 0.111
    assert float(allan.edf_flicker_fm(n, 16)) == 1.0
    assert float(allan.edf_white_fm(n, 16)) == 1.0


def test_flicker_edf_at_m1_is_of_order_n():
    # SP 1065 Table 5 (memory): flicker FM, m = 1: 2(N − 2)²/(2.3N − 4.9) ≈ 0.87·N. allantools
    # 2024.6 omits the square (its value is below 1), so it cannot be the oracle here.
    n = 1000
    big_n = n + 1
    assert allan.edf_flicker_fm(n, 1) == near(2 * (big_n - 2) ** 2 / (2.3 * big_n - 4.9))
    assert 0.8 * n < float(allan.edf_flicker_fm(n, 1)) < 0.9 * n


def test_bad_series_are_refused():
    with pytest.raises(ComputationError):
        allan.oadev([1.0])
    with pytest.raises(ComputationError):
        allan.oadev([1.0, np.nan, 2.0, 3.0])
    with pytest.raises(ComputationError):
        allan.oadev(np.arange(10.0), [6])           # 2·6 > 10
    with pytest.raises(ComputationError):
        allan.allan_curve(np.arange(10.0), "hdev")
