"""Checks of budget.stats.regression against GUM H.3 and open reference libraries.

Sources:
* JCGM 100:2008 (GUM), Annex H.3 (thermometer calibration) — data and published results as
  listed in /work/shared/REFERENCES.md (published values there are marked memory but recompute
  exactly); tolerance one unit in the last published digit.
* numpy.polyfit (w=1/σ, cov="unscaled"), scipy.optimize.curve_fit (absolute_sigma=True/False)
  and scipy.stats.linregress as independent least-squares implementations.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numeric import near
from scipy import optimize, stats

from budget.errors import ComputationError
from budget.references.h3 import B_K, T0, T_K, h3_case
from budget.stats.regression import fit


# ---------------------------------------------------------------- GUM H.3 (unweighted)
@pytest.fixture(scope="module")
def h3():
    return fit(T_K, B_K, model="line", x0=T0)


def test_h3_intercept(h3):
    assert abs(h3.params[0] - (-0.1712)) <= 1e-4       # GUM H.3: y1 = −0.1712 °C
    assert abs(h3.std_errors[0] - 0.0029) <= 1e-4      # GUM H.3: s(y1) = 0.0029 °C


def test_h3_slope(h3):
    assert abs(h3.params[1] - 0.00218) <= 1e-5         # GUM H.3: y2 = 0.00218
    assert abs(h3.std_errors[1] - 0.00067) <= 1e-5     # GUM H.3: s(y2) = 0.00067


def test_h3_correlation_and_scatter(h3):
    assert abs(h3.correlation - (-0.930)) <= 1e-3      # GUM H.3: r(y1, y2) = −0.930
    assert abs(h3.residual_sd - 0.0035) <= 1e-4        # GUM H.3: residual s = 0.0035 °C
    assert h3.dof == 9                                 # GUM H.3: ν = n − 2 = 11 − 2
    assert not h3.weighted and not h3.inflated


def test_h3_prediction_at_30C(h3):
    b, u = h3.predict(30.0)
    assert abs(b - (-0.1494)) <= 1e-4                  # GUM H.3: b(30 °C) = −0.1494 °C
    assert abs(u - 0.0041) <= 1e-4                     # GUM H.3: u[b(30 °C)] = 0.0041 °C


def test_h3_case_for_validate_uses_the_same_code(h3):
    checks = h3_case()
    # the eight published H.3 numbers: y1, s(y1), y2, s(y2), r(y1, y2), residual s,
    # b(30 °C) and its u (REFERENCES.md)
    assert len(checks) == 8
    assert all(c.passed for c in checks), [c for c in checks if not c.passed]
    assert all("H.3" in c.source for c in checks)
    # the list carries the very numbers this fit computes (same code path)
    assert checks[0].computed == h3.params[0]
    assert checks[7].computed == h3.predict(30.0)[1]


def test_h3_against_linregress():
    # scipy.stats.linregress: an independent ordinary least-squares implementation
    ref = stats.linregress(np.asarray(T_K) - T0, B_K)
    f = fit(T_K, B_K, x0=T0)
    assert f.params[0] == near(ref.intercept, rel=1e-12)
    assert f.params[1] == near(ref.slope, rel=1e-12)
    assert f.std_errors[0] == near(ref.intercept_stderr, rel=1e-10)
    assert f.std_errors[1] == near(ref.stderr, rel=1e-10)


# ---------------------------------------------------------------- weighted fits
def _weighted_data(seed=20261201, n=15):
    # synthetic data with a known truth (fixed seed); σ differs point to point
    rng = np.random.default_rng(seed)
    x = np.sort(rng.uniform(0, 10, n))
    sigma = rng.uniform(0.5, 2.0, n)
    y = 3.0 - 0.7 * x + rng.normal(0, sigma)
    return x, y, sigma


def test_weighted_line_matches_polyfit_unscaled():
    x, y, s = _weighted_data()
    f = fit(x, y, s, x0=0.0, inflate="never")
    # numpy.polyfit with w = 1/σ and cov="unscaled": covariance (XᵀWX)⁻¹, order [slope, intercept]
    p, cov = np.polyfit(x, y, 1, w=1 / s, cov="unscaled")
    assert f.params[1] == near(p[0], rel=1e-10)
    assert f.params[0] == near(p[1], rel=1e-10)
    assert f.cov[1][1] == near(cov[0, 0], rel=1e-9)
    assert f.cov[0][0] == near(cov[1, 1], rel=1e-9)
    assert f.cov[0][1] == near(cov[0, 1], rel=1e-9)
    assert math.isinf(f.dof)


def test_weighted_line_matches_curve_fit_absolute_sigma():
    x, y, s = _weighted_data(seed=7)
    f = fit(x, y, s, x0=4.0, inflate="never")
    # scipy.optimize.curve_fit with absolute_sigma=True, same parametrisation about x0 = 4
    popt, pcov = optimize.curve_fit(lambda t, a, b: a + b * (t - 4.0), x, y, sigma=s,
                                    absolute_sigma=True)
    # curve_fit iterates (Levenberg–Marquardt): agreement to its convergence tolerance
    np.testing.assert_allclose(f.params, popt, rtol=1e-6)
    np.testing.assert_allclose(f.covariance, pcov, rtol=1e-6)


def test_chi2_and_p_value():
    x, y, s = _weighted_data(seed=3)
    f = fit(x, y, s)
    resid = y - (f.params[0] + f.params[1] * x)
    chi2 = float(np.sum((resid / s) ** 2))          # definition χ² = Σ(r/σ)²
    assert f.chi2 == near(chi2, rel=1e-10)
    assert f.birge_ratio == near(math.sqrt(chi2 / (len(x) - 2)), rel=1e-10)
    assert f.p_value == near(stats.chi2.sf(chi2, len(x) - 2), rel=1e-10)


def test_inflation_matches_curve_fit_relative_sigma():
    # stated σ three times too small: the χ² test rejects and the covariance is scaled by χ²/ν,
    # which is what curve_fit does with absolute_sigma=False
    x, y, s = _weighted_data(seed=11)
    f = fit(x, y, s / 3, x0=0.0)
    assert f.inflated and f.p_value < 0.05
    assert f.dof == len(x) - 2
    popt, pcov = optimize.curve_fit(lambda t, a, b: a + b * t, x, y, sigma=s / 3,
                                    absolute_sigma=False)
    np.testing.assert_allclose(f.covariance, pcov, rtol=1e-6)
    assert "exceeds" in f.verdict


def test_consistent_scatter_not_inflated_and_never_deflated():
    x, y, s = _weighted_data(seed=5)
    f = fit(x, y, s * 10)  # σ far too large: R_B ≪ 1
    assert f.birge_ratio < 1 and not f.inflated and f.scale == 1.0
    _, cov = np.polyfit(x, y, 1, w=1 / (s * 10), cov="unscaled")
    assert f.cov[1][1] == near(cov[0, 0], rel=1e-9)  # kept at (XᵀWX)⁻¹


def test_policies_differ_where_birge_slightly_above_one():
    # a scatter with R_B between 1 and the 5 % χ² critical value: "birge" inflates, the test
    # does not (scipy.stats.chi2 gives the critical value)
    x, y, s = _weighted_data(seed=1)
    base = fit(x, y, s, inflate="never")
    nu = len(x) - 2
    target = 0.5 * (1.0 + stats.chi2.ppf(0.95, nu) / nu)  # a reduced χ² between 1 and critical
    s_adj = s * math.sqrt(base.reduced_chi2 / target)
    t = fit(x, y, s_adj, inflate="chi2-test")
    b = fit(x, y, s_adj, inflate="birge")
    assert 1 < t.birge_ratio ** 2 < stats.chi2.ppf(0.95, nu) / nu
    assert not t.inflated and b.inflated
    assert b.cov[0][0] == near(t.cov[0][0] * t.reduced_chi2, rel=1e-12)


def test_constant_is_weighted_mean():
    x, y, s = _weighted_data(seed=9)
    f = fit(x, y, s, model="constant", inflate="never")
    # weighted mean Σwy/Σw with u = (Σw)^(−1/2), w = 1/σ² (numpy.average as the reference)
    assert f.params[0] == near(np.average(y, weights=1 / s ** 2), rel=1e-12)
    assert f.std_errors[0] == near(np.sum(1 / s ** 2) ** -0.5, rel=1e-12)
    assert f.predict(123.0) == near((f.params[0], f.std_errors[0]))


def test_unweighted_constant_is_mean_and_standard_error():
    y = np.array([1.2, 0.9, 1.1, 1.3, 0.8])
    f = fit(np.zeros(5), y, model="constant")
    assert f.params[0] == near(y.mean())          # arithmetic mean, JCGM 100 4.2.1
    assert f.std_errors[0] == near(y.std(ddof=1) / math.sqrt(5))  # JCGM 100 4.2.3
    assert f.dof == 4                                      # ν = n − 1, JCGM 100 G.3.3


def test_proportional_matches_curve_fit():
    rng = np.random.default_rng(42)
    x = np.linspace(-10, 10, 21)
    y = 1.0000003 * x + rng.normal(0, 1e-6, x.size)
    f = fit(x, y, model="proportional")
    popt, pcov = optimize.curve_fit(lambda t, a: a * t, x, y)  # unweighted, scaled covariance
    assert f.params[0] == near(popt[0], rel=1e-12)
    assert f.std_errors[0] == near(math.sqrt(pcov[0, 0]), rel=1e-6)
    assert f.dof == x.size - 1


def test_large_abscissae_are_well_conditioned():
    # x in seconds since 1970 (~1.8e9): the prediction must not depend on the origin chosen
    # (derivation: a reparametrisation of the same line)
    x, y, s = _weighted_data(seed=2)
    x_big = 1.8e9 + x * 86400.0
    a = fit(x_big, y, s, x0=float(x_big[-1]), inflate="never")
    b = fit(x * 86400.0, y, s, x0=float(x[-1] * 86400.0), inflate="never")
    assert a.params[0] == near(b.params[0], rel=1e-10)
    assert a.std_errors[0] == near(b.std_errors[0], rel=1e-8)
    ya, ua = a.predict(x_big[0])
    yb, ub = b.predict(x[0] * 86400.0)
    assert ya == near(yb, rel=1e-9) and ua == near(ub, rel=1e-7)


def test_prediction_vectorised_equals_scalar(h3):
    xs = np.array([20.0, 25.0, 30.0])
    ys, us = h3.predict(xs)
    for xv, yv, uv in zip(xs, ys, us):
        assert (yv, uv) == near(h3.predict(float(xv)))


def test_to_dict_is_json_ready(h3):
    import json
    json.dumps(h3.to_dict(), allow_nan=False)
    assert h3.to_dict()["chi2"] is None  # unweighted: no χ²


@pytest.mark.parametrize("scale", [1e160, 1e-170])
def test_covariance_beyond_float64_is_refused(scale):
    # u² of 1e160 overflows float64 (largest ≈ 1.8e308) and of 1e-170 underflows below the
    # smallest subnormal ≈ 4.9e-324 (IEEE 754 binary64): refused, never passed on as inf or 0
    x = [0.0, 1.0, 2.0]
    with pytest.raises(ComputationError, match="float64"):
        fit(x, [scale, 1.1 * scale, 0.9 * scale], [scale] * 3)


@pytest.mark.parametrize("args, kwargs, words", [
    (([1, 2], [1, 2]), {}, "too few"),                       # unweighted line needs 3
    (([1, 1, 1], [1, 2, 3]), {}, "abscissae are equal"),
    (([1, 2, 3], [1, 2, 3], [1, 0, 1]), {}, "> 0"),
    (([1, 2, 3], [1, 2, 3], [1, -1, 1]), {}, "> 0"),
    (([1, 2, 3], [1, float("nan"), 3]), {}, "finite"),
    (([1, 2, 3], [1, 2, 3]), {"model": "cubic"}, "model"),
    (([1, 2, 3], [1, 2, 3]), {"inflate": "sometimes"}, "inflate"),
    (([1, 2, 3], [1, 2, 3]), {"alpha": 1.5}, "alpha"),
    (([0, 0, 0], [1, 2, 3]), {"model": "proportional"}, "zero"),
])
def test_bad_input_raises_project_error(args, kwargs, words):
    with pytest.raises(ComputationError, match=words):
        fit(*args, **kwargs)


# ---------------------------------------------------------------- few points, by hand
def test_three_point_weighted_line_by_hand():
    # x = 0, 1, 2; y = 0, 1, 3; u = 1 (invented numbers, solved by hand with the normal
    # equations): slope Σ(x − x̄)(y − ȳ)/Σ(x − x̄)² = (4/3 + 5/3)/2 = 3/2, intercept
    # ȳ − 3/2·x̄ = −1/6; residuals 1/6, −1/3, 1/6, Σr² = 1/6 on ν = 1
    f = fit([0.0, 1.0, 2.0], [0.0, 1.0, 3.0], [1.0, 1.0, 1.0], inflate="never")
    assert f.params == (near(-1 / 6, rel=1e-12), near(1.5, rel=1e-12))
    assert f.residuals == near([1 / 6, -1 / 3, 1 / 6], rel=1e-12)
    assert f.nu == 1
    assert f.residual_sd == near(math.sqrt(1 / 6), rel=1e-12)
    assert f.chi2 == near(1 / 6, rel=1e-12)
    assert f.p_value == near(float(stats.chi2.sf(1 / 6, 1)), rel=1e-12)   # scipy.stats
    # (XᵀX)⁻¹ with X = [1, x]: [[5/6, −1/2], [−1/2, 1/2]] (by hand)
    assert f.covariance == near(np.array([[5 / 6, -0.5], [-0.5, 0.5]]), rel=1e-12)
    # project wording: the "never" policy says the stated uncertainties were kept
    assert f.verdict.startswith("stated uncertainties kept as they are")


def test_as_many_points_as_parameters():
    # two points, a line: ν = 0, nothing to check the scatter against (JCGM 100 H.3: the
    # residual variance needs n − 2 > 0); the stated uncertainties stand, ν stays infinite
    f = fit([0.0, 2.0], [1.0, 5.0], [0.5, 0.5])
    assert f.params == (near(1.0, rel=1e-12), near(2.0, rel=1e-12))
    assert f.nu == 0 and math.isnan(f.residual_sd) and math.isnan(f.chi2)
    assert math.isnan(f.p_value) and not f.inflated and f.dof == math.inf
    assert "as many parameters as points" in f.verdict
    # u(p0) = 0.5 at x0 = 0 (the first point alone fixes it); u(slope) = √2·0.5/2
    assert f.std_errors == (near(0.5, rel=1e-12), near(math.sqrt(2) * 0.25, rel=1e-12))


def test_proportional_prediction_and_its_uncertainty():
    # JCGM 100 H.3 with g = x for y = a·x: ŷ(x) = a·x, u(ŷ) = |x|·u(a); a and u(a) from
    # scipy.optimize.curve_fit (unweighted, scaled covariance), as in the test above
    rng = np.random.default_rng(42)
    x = np.linspace(-10, 10, 21)
    y = 1.0000003 * x + rng.normal(0, 1e-6, x.size)
    f = fit(x, y, model="proportional")
    popt, pcov = optimize.curve_fit(lambda t, a: a * t, x, y)
    value, u = f.predict(-2.5)
    assert value == near(-2.5 * popt[0], rel=1e-12)
    assert u == near(2.5 * math.sqrt(pcov[0, 0]), rel=1e-6)


@pytest.mark.parametrize("cov", [np.diag([1.0, math.nan, 1.0]), np.eye(2), np.eye(4)])
def test_covariance_of_the_observations_must_be_finite_and_n_by_n(cov):
    # regression.fit docstring: cov is the n × n covariance of the observations; a NaN in
    # it, or another shape, is refused with the project's error
    with pytest.raises(ComputationError, match="finite 3 x 3"):
        fit([0.0, 1.0, 2.0], [1.0, 2.0, 2.5], cov=cov)
