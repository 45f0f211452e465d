"""Inverse distribution functions of every kind against scipy.stats (open reference library).

scipy's parametrisations: triang(c, loc, scale) with c = (mode − low)/(high − low);
trapezoid(c, d, loc, scale) with c = (1 − β)/2, d = (1 + β)/2 for a symmetric trapezoid whose
top is β times its base; arcsine(loc, scale); t(ν, loc, scale). The grid reaches both tails
and both sides of a triangular mode, so every branch of each inverse is evaluated.
"""

from __future__ import annotations

import numpy as np
import pytest
from numeric import near
from scipy import stats

from budget.distributions import Distribution

P = np.array([1e-6, 0.01, 0.1, 0.25, 0.5, 0.7, 0.9, 0.99, 1 - 1e-6])

CASES = [
    (Distribution.normal(3.0, 0.5), stats.norm(3.0, 0.5)),
    (Distribution.rectangular(-1.0, 4.0), stats.uniform(-1.0, 5.0)),
    (Distribution.triangular(0.0, 10.0, 2.0), stats.triang(0.2, loc=0.0, scale=10.0)),
    (Distribution.triangular(-2.0, 2.0), stats.triang(0.5, loc=-2.0, scale=4.0)),
    (Distribution.arcsine(0.5, 2.5), stats.arcsine(loc=0.5, scale=2.0)),
    (Distribution.trapezoidal(1.0, 3.0, 0.4), stats.trapezoid(0.3, 0.7, loc=1.0, scale=2.0)),
    (Distribution.trapezoidal(1.0, 3.0, 0.0), stats.triang(0.5, loc=1.0, scale=2.0)),
    (Distribution.student_t(1.0, 0.2, 4.0), stats.t(4.0, loc=1.0, scale=0.2)),
]


@pytest.mark.parametrize("dist,ref", CASES, ids=lambda c: getattr(c, "kind", ""))
def test_ppf_matches_scipy(dist, ref):
    # 1e-9 relative: closed forms against scipy's (float rounding of sqrt/cos near the ends);
    # an absolute 1e-12 of the width covers a quantile that is 0 (the symmetric cases' median)
    width = float(ref.ppf(0.99) - ref.ppf(0.01))
    assert dist.ppf(P) == near(ref.ppf(P), rel=1e-9, abs=1e-12 * width)
