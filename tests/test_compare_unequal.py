"""E_n against the weighted mean with a shared term and unequal uncertainties (issue 18).

With equal u the shortcut V_ii − aᵀVa and the correct V_ii − 2(Va)_i + aᵀVa agree, so this
case has unequal u. Hand computation (var(x_i − x̄) for x̄ = Σ a_j x_j, the variance of a
linear combination, JCGM 100 eq. (13)); the runs come from tests/test_compare.py's spec.

Run 1: x = 1, u(x) = 0.45; run 2: x = 2, u(x) = 0.80; both share the resistor term r with
u = 0.60, c = 1 (same history file digest); values in units of S = 1e-8.
  u_1² = 0.45² + 0.60² = 0.5625 (u_1 = 0.75), u_2² = 0.80² + 0.60² = 1.0, cov = 0.36
  w = (1/0.5625, 1) = (16/9, 1), Σw = 25/9, a = (0.64, 0.36)
  x̄ = 0.64·1 + 0.36·2 = 1.36
  Va = (0.5625·0.64 + 0.36·0.36, 0.36·0.64 + 1.0·0.36) = (0.4896, 0.5904)
  aᵀVa = 0.64·0.4896 + 0.36·0.5904 = 0.525888
  var(x_1 − x̄) = 0.5625 − 2·0.4896 + 0.525888 = 0.109188
  var(x_2 − x̄) = 1.0 − 2·0.5904 + 0.525888 = 0.345088
Cross-check: x_1 − x̄ = 0.36 (x_1 − x_2) and x_2 − x̄ = 0.64 (x_2 − x_1), with
var(x_1 − x_2) = 0.5625 + 1.0 − 2·0.36 = 0.8425: 0.36²·0.8425 = 0.109188, 0.64²·0.8425 = 0.345088.
E_n (k = 2): run 1: −0.36/(2√0.109188); run 2: 0.64/(2√0.345088); both equal the pairwise
E_n −1/(2√0.8425) up to sign (the mean of two runs lies on the line between them).
"""

from __future__ import annotations

import math

from numeric import near
from test_compare import S, digest_of, record

from budget.compare import compare_runs
from budget.record import record_from_dict


def _runs():
    h = digest_of("the same resistor history")
    r1 = record_from_dict(record(1 * S, 0.45 * S, 0.60 * S, digest=h))
    r2 = record_from_dict(record(2 * S, 0.80 * S, 0.60 * S, digest=h))
    return r1, r2


def test_en_against_the_mean_with_shared_term_and_unequal_u():
    c = compare_runs(list(_runs()), pairwise=True)
    # values to 1e-6 relative: the record's dev = I/(n·e·f) − 1 carries ~1e-16 absolute
    # rounding on these 1e-8 values (derivation); the uncertainties are linear and exact
    assert c.mean.value == near(1.36 * S, rel=1e-6)
    assert c.mean.internal_uncertainty == near(math.sqrt(9 / 25) * S, rel=1e-9)
    assert c.mean.uncertainty_with_shared == near(math.sqrt(0.525888) * S, rel=1e-9)
    e1, e2 = c.en
    assert e1.standard_uncertainty == near(math.sqrt(0.109188) * S, rel=1e-9)
    assert e2.standard_uncertainty == near(math.sqrt(0.345088) * S, rel=1e-9)
    assert e1.en == near(-0.36 / (2 * math.sqrt(0.109188)), rel=1e-6)
    assert e2.en == near(0.64 / (2 * math.sqrt(0.345088)), rel=1e-6)
    (pair,) = c.pairwise
    assert pair.en == near(-1 / (2 * math.sqrt(0.8425)), rel=1e-6)
    assert e1.en == near(pair.en, rel=1e-6) and e2.en == near(-pair.en, rel=1e-6)
