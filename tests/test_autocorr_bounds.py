"""Bounds and defaults of budget.stats.autocorr (mutants that survived ``make mutate``).

Sources: the default cap of ⌊n/4⌋ lags is the project's convention, stated with its reason in
budget/stats/autocorr.py's docstring (beyond it fewer than 3n/4 pairs enter an estimate);
lag 0 to n − 1 are the only lags a series of n values has (definition of the sample
autocorrelation, common practice).
"""

from __future__ import annotations

import numpy as np
import pytest

from budget.errors import ComputationError
from budget.stats.autocorr import autocorrelation, effective_number


def test_default_cap_is_a_quarter_of_the_series():
    x = np.random.default_rng(4).normal(size=103)
    assert effective_number(x).max_lag == 103 // 4 == 25


def test_explicit_cap_is_clipped_to_the_lags_that_exist():
    x = np.random.default_rng(5).normal(size=10)
    assert effective_number(x, max_lag=1000).max_lag == 9
    assert effective_number(x, max_lag=-3).max_lag == 0
    assert effective_number(x, max_lag=3).max_lag == 3


def test_shortest_series_accepted_and_refused():
    # effective_number needs 4 values (module docstring); autocorrelation needs 2
    effective_number([1.0, 3.0, 2.0, 5.0])
    with pytest.raises(ComputationError):
        effective_number([1.0, 3.0, 2.0])
    r = autocorrelation([1.0, 2.0])
    # two values: x − x̄ = (−½, ½), r_1 = (−¼)/(½) = −½ (definition r_k = c_k/c_0)
    assert r.tolist() == [1.0, -0.5]
    with pytest.raises(ComputationError, match="at least 2 values"):
        autocorrelation([1.0])
    # a table (2-D) is not a series, whatever its length (module docstring: a 1-D series)
    with pytest.raises(ComputationError, match="at least 2 values"):
        autocorrelation(np.arange(6.0).reshape(3, 2))


def test_every_lag_up_to_n_minus_one_and_no_further():
    x = [1.0, 4.0, 2.0, 8.0, 5.0]
    assert len(autocorrelation(x, 4)) == 5
    with pytest.raises(ComputationError):
        autocorrelation(x, 5)
