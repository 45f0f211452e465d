"""E_n against the weighted mean with a shared term and unequal uncertainties (issue 18).

With equal u every weighting and every shortcut for var(x_i − x̄) agree, so this case has
unequal u. Hand computation: generalised least-squares mean (Cox, Metrologia 39, 589, 2002 —
memory: a = V⁻¹1/(1ᵀV⁻¹1), u²(x̄) = 1/(1ᵀV⁻¹1)) and the variance of a linear combination
(JCGM 100 eq. (13)): var(x_i − x̄) = V_ii − 2(Va)_i + aᵀVa. The runs come from
tests/test_compare.py's spec; E_n with U = 2u (en_basis "2u", ISO 13528).

Run 1: x = 1, u(x) = 0.45; run 2: x = 2, u(x) = 0.80; both share the resistor term r with
u = 0.60, c = 1 (same history file digest); values in units of S = 1e-8.
  u_1² = 0.45² + 0.60² = 0.5625, u_2² = 0.80² + 0.60² = 1.0, cov = 0.60² = 0.36
  det V = 0.5625 − 0.1296 = 0.4329; V⁻¹1 = (1.0 − 0.36, 0.5625 − 0.36)/det = (0.64, 0.2025)/det
  1ᵀV⁻¹1 = 0.8425/det; a = (0.64, 0.2025)/0.8425; u²(x̄) = det/0.8425 = 0.4329/0.8425
  x̄ = a_1·1 + a_2·2 = 1 + 0.2025/0.8425
  (Va)_i = u²(x̄) for both runs (GLS), so var(x_i − x̄) = V_ii − u²(x̄):
  var(x_1 − x̄) = 0.5625 − 0.4329/0.8425,   var(x_2 − x̄) = 1.0 − 0.4329/0.8425
Cross-check: x_1 − x̄ = a_2 (x_1 − x_2), var(x_1 − x_2) = 0.5625 + 1.0 − 2·0.36 = 0.8425, so
var(x_1 − x̄) = 0.2025²/0.8425, var(x_2 − x̄) = 0.64²/0.8425, and both E_n equal the pairwise
E_n ∓1/(2√0.8425) (the mean of two runs lies on the line between them).
The independent-run weights 1/u_i² would give x̄ = 1.36 instead (a = (0.64, 0.36)).
"""

from __future__ import annotations

import math

from numeric import near
from test_compare import S, digest_of, record

from budget.compare import compare_runs
from budget.record import record_from_dict

U2_MEAN = 0.4329 / 0.8425
A2 = 0.2025 / 0.8425


def _runs():
    h = digest_of("the same resistor history")
    r1 = record_from_dict(record(1 * S, 0.45 * S, 0.60 * S, digest=h))
    r2 = record_from_dict(record(2 * S, 0.80 * S, 0.60 * S, digest=h))
    return r1, r2


def test_en_against_the_mean_with_shared_term_and_unequal_u():
    c = compare_runs(list(_runs()), pairwise=True, en_basis="2u")
    assert [s.name for s in c.shared] == ["r"]
    # values to 1e-6 relative: the record's dev = I/(n·e·f) − 1 carries ~1e-16 absolute
    # rounding on these 1e-8 values (derivation); the uncertainties are linear and exact
    assert c.mean.value == near((1 + A2) * S, rel=1e-6)
    assert c.mean.internal_uncertainty == near(math.sqrt(U2_MEAN) * S, rel=1e-9)
    e1, e2 = c.en
    assert e1.standard_uncertainty == near(math.sqrt(0.5625 - U2_MEAN) * S, rel=1e-9)
    assert e2.standard_uncertainty == near(math.sqrt(1.0 - U2_MEAN) * S, rel=1e-9)
    assert e1.standard_uncertainty == near(math.sqrt(0.2025 ** 2 / 0.8425) * S, rel=1e-9)
    assert e2.standard_uncertainty == near(math.sqrt(0.64 ** 2 / 0.8425) * S, rel=1e-9)
    (pair,) = c.pairwise
    assert pair.en == near(-1 / (2 * math.sqrt(0.8425)), rel=1e-6)
    assert e1.en == near(-1 / (2 * math.sqrt(0.8425)), rel=1e-6)
    assert e2.en == near(1 / (2 * math.sqrt(0.8425)), rel=1e-6)


def test_en_against_the_mean_when_the_weights_are_not_the_gls_ones():
    # With GLS weights (Va)_i = aᵀVa for every i (Va = V·V⁻¹1/(1ᵀV⁻¹1) = u²(x̄)·1), so the
    # shortcut V_ii − aᵀVa equals V_ii − 2(Va)_i + aᵀVa and a test with GLS weights cannot tell
    # them apart. Here both runs carry only the shared resistor term, with sensitivities 1 and 2
    # (cr), so V = g gᵀ with g = (0.6, 1.2) is singular and the weights fall back to 1/u_i².
    # Hand computation (JCGM 100 eq. (13) for a linear combination c of the results):
    #   w = (1/0.36, 1/1.44), a = (0.8, 0.2); x̄ = 0.8·1 + 0.2·2 = 1.2
    #   u(x̄) internal = (1/0.36 + 1/1.44)^(−1/2) = √0.288; with the shared term: a·g = 0.72
    #   c = e_1 − a = (0.2, −0.2): var = (c·g)² = (0.12 − 0.24)² = 0.0144, u = 0.12
    #   c = e_2 − a = (−0.8, 0.8): var = (−0.48 + 0.96)² = 0.2304, u = 0.48
    #   (the shortcut would give 0.36 − 0.72² < 0 and 1.44 − 0.72² = 0.9216)
    #   E_n = (x_i − x̄)/(2u): (−0.2)/(0.24) = −5/6 and 0.8/0.96 = 5/6
    #   χ² from the diagonal: 0.2²/0.36 + 0.8²/1.44 = 5/9
    h = digest_of("the same resistor history")
    r1 = record_from_dict(record(1 * S, 0.0, 0.60 * S, cr=1, digest=h))
    r2 = record_from_dict(record(2 * S, 0.0, 0.60 * S, cr=2, digest=h))
    c = compare_runs([r1, r2], en_basis="2u")
    assert any("singular" in n for n in c.notes), c.notes
    assert c.mean.value == near(1.2 * S, rel=1e-6)
    assert c.mean.internal_uncertainty == near(math.sqrt(0.288) * S, rel=1e-9)
    assert c.mean.uncertainty_with_shared == near(0.72 * S, rel=1e-9)
    assert c.mean.chi2 == near(5 / 9, rel=1e-6)
    e1, e2 = c.en
    assert e1.standard_uncertainty == near(0.12 * S, rel=1e-9)
    assert e2.standard_uncertainty == near(0.48 * S, rel=1e-9)
    assert e1.en == near(-5 / 6, rel=1e-6)
    assert e2.en == near(5 / 6, rel=1e-6)
