"""Sample autocorrelation and the Zhang/Witt effective number (budget.stats.autocorr).

Outside references: Zhang, Metrologia 43, S276 (2006) and Witt, Metrologia 44, 201 (2007) for
u²(x̄) = (s²/n)[1 + 2Σ(1 − k/n)ρ_k]; Bartlett's large-sample variance of r_k (Box & Jenkins,
Time Series Analysis, §2.1.6 — memory). The other checks are derivations stated beside them.
"""

import numpy as np
import pytest
from numeric import near

from budget.errors import ComputationError
from budget.stats import autocorr


def test_fft_autocorrelation_equals_the_direct_sum():
    # definition: r_k = Σ_{i<n−k}(x_i − x̄)(x_{i+k} − x̄) / Σ(x_i − x̄)²
    rng = np.random.default_rng(1)
    x = rng.normal(size=257) + 5.0
    xc = x - x.mean()
    direct = np.array([np.dot(xc[: len(x) - k], xc[k:]) for k in range(40)]) / np.dot(xc, xc)
    np.testing.assert_allclose(autocorr.autocorrelation(x, 39), direct, rtol=0, atol=1e-13)


def test_plain_sum_of_all_lags_is_minus_one_half():
    # derivation: Σ_{k≥1} c_k = [(Σ xc)² − Σ xc²]/2 = −c_0/2 because Σ xc = 0 — the reason the
    # sum must be truncated (module docstring)
    x = np.random.default_rng(2).normal(size=300)
    r = autocorr.autocorrelation(x)
    assert r[1:].sum() == near(-0.5, abs=1e-12)


def test_zhang_formula_is_exact_for_a_known_ma1_process():
    # MA(1): d_i = e_i + e_{i+1}, var(e) = 1 → γ0 = 2, γ1 = 1, ρ1 = 1/2. The exact variance of
    # the mean of n terms is [nγ0 + 2(n − 1)γ1]/n² (derivation); Zhang/Witt with the
    # population ρ must give the same.
    n = 50
    exact = (n * 2 + 2 * (n - 1) * 1) / n ** 2
    assert (2 / n) * autocorr.variance_factor([0.5], n) == near(exact, rel=1e-14)


def test_ar1_sample_autocorrelation_within_bartlett_bounds():
    # AR(1) with φ = 0.6: ρ_k = φ^k. Bartlett (memory): var(r_k) ≈ (1/n)[(1 + φ²)(1 − φ^{2k})
    # /(1 − φ²) − 2kφ^{2k}]. Checked at 4 standard deviations for k = 1..5.
    phi, n = 0.6, 20000
    rng = np.random.default_rng(3)
    e = rng.normal(size=n + 200)
    x = np.empty_like(e)
    x[0] = e[0]
    for i in range(1, len(e)):      # small explicit loop: a fixture, not library code
        x[i] = phi * x[i - 1] + e[i]
    x = x[200:]
    r = autocorr.autocorrelation(x, 5)
    for k in range(1, 6):
        var = ((1 + phi ** 2) * (1 - phi ** (2 * k)) / (1 - phi ** 2) - 2 * k * phi ** (2 * k)) / n
        assert abs(r[k] - phi ** k) < 4 * np.sqrt(var), k


def test_truncation_never_narrows():
    # the rule sums the initial positive sequence only: an alternating (negatively correlated)
    # series has r_1 < 0, so the factor is exactly 1 and no lag is used (module docstring)
    x = np.tile([1.0, -1.0], 50) + np.linspace(0, 1e-3, 100)
    en = autocorr.effective_number(x)
    assert en.lags_used == 0 and en.factor == 1.0 and en.n_eff == 100


def test_effective_number_corrects_ar1_across_records():
    # AR(1), φ = 0.5, n = 400: the naive s/√n is too small by √[(1 + φ)/(1 − φ)] ≈ 1.73 for
    # large n (derivation from Σρ_k = φ/(1 − φ)). With the truncated correction the mean of
    # z² over 300 records must be near 1: bounds [0.7, 1.4] allow for the χ² scatter of 300
    # values (±0.16 at 2σ) plus the known small-sample bias of estimated r_k (they are biased
    # low by ≈ (1 + 2Σρ)/n per lag, which makes the correction slightly short).
    phi, n, records = 0.5, 400, 300
    rng = np.random.default_rng(4)
    e = rng.normal(size=(records, n + 100))
    x = np.empty_like(e)
    x[:, 0] = e[:, 0]
    for i in range(1, e.shape[1]):
        x[:, i] = phi * x[:, i - 1] + e[:, i]
    x = x[:, 100:]
    z_corr, z_naive = [], []
    for row in x:
        en = autocorr.effective_number(row)
        s = row.std(ddof=1)
        z_corr.append(row.mean() / (s / np.sqrt(en.n_eff)))
        z_naive.append(row.mean() / (s / np.sqrt(n)))
    assert 0.7 < np.mean(np.square(z_corr)) < 1.4
    assert np.mean(np.square(z_naive)) > 2.2      # expected ≈ 3 = (1 + φ)/(1 − φ)


def test_bad_series():
    with pytest.raises(ComputationError):
        autocorr.autocorrelation([1.0])
    with pytest.raises(ComputationError):
        autocorr.autocorrelation([2.0, 2.0, 2.0])
    with pytest.raises(ComputationError):
        autocorr.effective_number([1.0, 2.0, 3.0])
