"""k = t_p(ν) on a grid of ν up to 10⁶, against scipy.stats.t.ppf (issue 18).

JCGM 100 G.3.4 / G.4.1: k is the two-sided Student-t quantile for ν effective degrees of
freedom; Table G.2 lists ν ≤ 100 and ∞ only, so a shortcut that returns the normal quantile
above ν = 100 (k = 1.960 instead of 1.984 at ν = 100, 1.972 at ν = 200) is invisible there.
Oracle: scipy.stats.t.ppf (an open reference library; budget/ uses scipy.special instead, so
the two code paths differ).
"""

from __future__ import annotations

import math

import pytest
from numeric import near
from scipy import stats

from budget.propagate.lpu import coverage_factor

# integer ν (no flooring question) from 1 to 10⁶, dense where the t and normal quantiles are
# still far apart and with points between Table G.2's last finite ν (100) and ∞
NUS = [1, 2, 3, 4, 5, 7, 10, 15, 20, 30, 50, 75, 100, 101, 150, 200, 300, 500, 1000, 2000,
       5000, 10_000, 30_000, 100_000, 300_000, 1_000_000]
PS = [0.6827, 0.90, 0.95, 0.9545, 0.99, 0.9973]


@pytest.mark.parametrize("p", PS)
def test_k_is_the_t_quantile_on_the_whole_grid(p):
    for nu in NUS:
        # rel 1e-9: the two libraries' quantile routines agree far better than that; a normal
        # quantile in place of t differs by ≈ (1 + z²)/(4ν) relative, 1.2e-6 at ν = 10⁶, p = 0.95
        assert coverage_factor(p, nu) == near(stats.t.ppf((1 + p) / 2, nu), rel=1e-9), (p, nu)


def test_between_100_and_infinity_k_is_above_the_normal_quantile():
    # t_ν quantiles decrease towards the normal one and exceed it for every finite ν
    # (property of Student's t; JCGM 100 Table G.2 shows the trend up to ν = 100)
    z = stats.norm.ppf(0.975)
    ks = [coverage_factor(0.95, nu) for nu in NUS]
    assert all(k > z for k in ks)
    assert all(a > b for a, b in zip(ks, ks[1:]))
    # ν = 200: t_0.975 = 1.9719 (Table G.2 stops at 100; scipy gives 1.97190, rounded here)
    assert coverage_factor(0.95, 200) == near(1.9719, abs=5e-5)
    assert coverage_factor(0.95, math.inf) == near(z, rel=1e-12)
