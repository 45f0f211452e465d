"""The ``sampled`` distribution: a module's samples carried into the budget's Monte Carlo
(issue 11 item 12), so the JCGM 101 §8 check sees an asymmetry that a normal would hide.

References, named beside each check:
* scipy.stats.lognorm (open reference library): quantiles, skewness and kurtosis of a
  lognormal with σ = 0.5: skewness (e^{σ²} + 2)√(e^{σ²} − 1) = 1.7502, kurtosis 8.898
  (closed forms of the lognormal, common practice).
* Moments of a rectangular distribution: skewness 0, kurtosis 9/5 (JCGM 101 §6.4.2; common
  practice).
* Order-statistic standard error of an empirical quantile, √(p(1 − p)/M)/f(y_p) (derivation,
  tests/test_mcm.py docstring).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numeric import near
from scipy import stats

from budget.distributions import SAMPLED_POINTS, Distribution
from budget.errors import BudgetError
from budget.model import build_model
from budget.propagate.mcm import McmSettings, monte_carlo
from budget.quantity import Quantity

SIGMA = 0.5
LOGN = stats.lognorm(s=SIGMA)


def _lognormal_samples(n=200_000, seed=7):
    return LOGN.rvs(size=n, random_state=np.random.default_rng(seed))


def test_mean_and_sd_are_the_samples_exactly():
    x = _lognormal_samples()
    d = Distribution.sampled(x)
    assert d.kind == "sampled" and len(d.quantiles) == SAMPLED_POINTS
    assert d.mean == float(np.mean(x)) and d.std == float(np.std(x, ddof=1))
    # the standardised table itself has mean 0 and sd 1 (exact piecewise-linear moments)
    z = np.asarray(d.quantiles)
    assert Distribution("sampled", loc=0.0, scale=1.0, quantiles=tuple(z)).std == 1.0


def test_shape_follows_scipy_lognormal():
    d = Distribution.sampled(_lognormal_samples())
    # skewness (e^{σ²}+2)√(e^{σ²}−1) = 1.7502 for σ = 0.5 (closed form; scipy agrees):
    assert float(LOGN.stats(moments="s")) == near(1.7502, abs=1e-4)
    # the table's extreme tails are linear between a few samples: a few % on γ, more on β
    assert d.skewness == near(1.7502, rel=0.08)
    assert d.kurtosis == near(float(LOGN.stats(moments="k")) + 3, rel=0.3)
    # draws by inversion reproduce the lognormal's 2.5 % and 97.5 % quantiles; tolerance:
    # the table's linear interpolation (≤ 1 % of the local spacing) plus 5 order-statistic
    # standard errors of 200 000 samples
    y = d.sample(np.random.default_rng(3), 1_000_000)
    for p in (0.025, 0.5, 0.975):
        se = math.sqrt(p * (1 - p) / 200_000) / LOGN.pdf(LOGN.ppf(p))
        assert float(np.quantile(y, p)) == near(float(LOGN.ppf(p)), abs=5 * se + 0.01)


def test_rectangular_samples_give_rectangular_moments():
    x = np.random.default_rng(11).uniform(-1, 1, 100_000)
    d = Distribution.sampled(x)
    assert d.skewness == near(0.0, abs=0.02)          # JCGM 101 §6.4.2: symmetric
    assert d.kurtosis == near(1.8, abs=0.02)          # 9/5


def test_record_round_trip():
    d = Distribution.sampled(_lognormal_samples(20_000))
    back = Distribution.from_dict(d.to_dict())
    assert back == d
    with pytest.raises(BudgetError):
        Distribution.from_dict({"kind": "sampled", "loc": 0, "scale": 1,
                                "quantiles": [0.0, -1.0, 2.0]})   # not non-decreasing


def test_monte_carlo_sees_the_asymmetry():
    # Synthetic truth: Y = X with X lognormal (σ = 0.5). A normal with the same mean and sd
    # gives a symmetric 95 % interval; the sampled distribution gives the lognormal's own
    # probabilistically symmetric interval [ppf(0.025), ppf(0.975)] (scipy.stats.lognorm).
    x = _lognormal_samples()
    d = Distribution.sampled(x)
    q = Quantity(name="X", value=d.mean, standard_uncertainty=d.std, distribution=d)
    model = build_model({"Y": "X"}, quantities={"X"}, constants={})
    r = monte_carlo(model, [q], np.eye(1), McmSettings(seed=5, trials=400_000))["Y"]
    lo, hi = r.symmetric
    for got, p in ((lo, 0.025), (hi, 0.975)):
        se = math.sqrt(p * (1 - p) / 200_000) / LOGN.pdf(LOGN.ppf(p))
        assert got == near(float(LOGN.ppf(p)), abs=6 * se + 0.01)
    # a normal of the same mean and sd would put the ends at mean ∓ 1.96 sd: visibly wrong
    assert abs((d.mean - 1.96 * d.std) - LOGN.ppf(0.025)) > 0.1


def test_tail_rule_with_as_many_samples_as_points():
    # project convention (distributions.py): the outer table value makes the outer segment's
    # mean equal the mean of the samples in its tail, tail = round(M/(points − 1)) samples, at
    # least 1. With the M = 9 samples 0 … 8 and 9 points the table is q_j = j inside, and
    # with tail = 1: q_0 = min(q_1, 2·0 − q_1) = −1, q_8 = max(q_7, 2·8 − q_7) = 9 (by hand).
    # The table is then standardised (an affine map), so its spacing ratios are kept: the
    # outer segments are twice as long as the inner ones.
    d = Distribution.sampled(np.arange(9.0), points=9)
    z = np.diff(np.asarray(d.quantiles))
    assert z / z[1] == near([2.0, 1, 1, 1, 1, 1, 1, 2.0], rel=1e-12)
    # M = 11 samples 0 … 10, 9 points: tail = round(11/8) = 1; inside q_j = 1.25·j (linear
    # interpolation of equally spaced samples), q_0 = 2·0 − 1.25 = −1.25, q_8 = 2·10 − 8.75
    # = 11.25: outer spacing 2.5, inner 1.25 (a tail of 2 samples would give 1.5, ratio 1.2)
    d = Distribution.sampled(np.arange(11.0), points=9)
    z = np.diff(np.asarray(d.quantiles))
    assert z / z[1] == near([2.0, 1, 1, 1, 1, 1, 1, 2.0], rel=1e-12)


def test_zero_sd_gives_a_constant():
    # project convention: a sampled quantity given sd = 0 is a constant (a normal of width 0),
    # not a quantile table scaled to nothing
    d = Distribution.sampled(np.arange(300.0), mean=5.0, sd=0.0)
    assert d.kind == "normal" and d.mean == 5.0 and d.std == 0.0
