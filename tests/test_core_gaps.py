"""Checks that kill mutants which survived ``make mutate`` (tests/mutate.py, tests/README.md).

Each check names its source beside it; every expected number is derived by hand or taken from
a published table, never from the package's output.
"""

from __future__ import annotations

import math
import textwrap

import numpy as np
import pytest
from numeric import near
from test_compare import S, record

from budget import evaluate
from budget.compare import ReferenceValue, compare_runs
from budget.coverage import dof_from_coverage_factor
from budget.errors import BudgetError, ComputationError, SpecError
from budget.inputs.pump.cascade import CascadeModel
from budget.inputs.pump.escape import EscapeModel
from budget.propagate.lpu import coverage_factor
from budget.record import record_from_dict
from budget.spec import parse_spec
from budget.stats import allan


# ------------------------------------------------------------------ coverage factor and ν
@pytest.mark.parametrize("p", [0.0, 1.0, 1.5, -0.2])
def test_coverage_probability_outside_the_open_interval_is_refused(p):
    # a coverage probability lies in (0, 1) (VIM 2.37 / JCGM 100 §6.2.2: a fraction of the
    # distribution); p = 1 would give k = ∞
    with pytest.raises(SpecError):
        coverage_factor(p, 10.0)
    with pytest.raises(BudgetError):
        dof_from_coverage_factor(2.0, p)


@pytest.mark.parametrize("k", [math.inf, math.nan, 0.99])
def test_coverage_factor_not_finite_or_below_one_is_refused(k):
    # project convention (budget/coverage.py): k < 1 would make U smaller than u
    with pytest.raises(BudgetError):
        dof_from_coverage_factor(k, 0.95)


def test_k_equal_to_one_at_68_27_percent_is_the_normal_quantile():
    # JCGM 100 Table G.1: p = 68.27 % ↔ k = 1 for a normal distribution, so ν = ∞
    assert dof_from_coverage_factor(1.0, 0.6827) == math.inf


# ------------------------------------------------------------------ second-order terms
def _second(inputs: str, model: str):
    text = textwrap.dedent(f"""
        [budget]
        propagation_order = 2
        [model]
        {model}
        [monte_carlo]
        enabled = false
    """) + textwrap.dedent(inputs)
    return evaluate(parse_spec(text, file="spec.toml")).measurand("Y")


def test_cube_of_a_rectangular_to_fourth_order():
    # Y = X³, X = μ + e with e rectangular on [−1, 1] around μ = 2: u² = 1/3, E e⁴ = 1/5
    # (β = E e⁴/u⁴ = 1.8), odd moments 0. By hand, X³ = μ³ + 3μ²e + 3μe² + e³, and the
    # variance through fourth order in e (the e⁶ term is sixth order):
    #   Var(3μ²e) = 9μ⁴u² = 48;  Var(3μe²) = 9μ²(E e⁴ − u⁴) = 36·(1/5 − 1/9) = 3.2;
    #   2 Cov(3μ²e, e³) = 6μ² E e⁴ = 24/5 = 4.8;  total 56.
    # (For a normal input, β = 3, this is JCGM 100 eq. (10)'s note: ½f''² u⁴ + f'f''' u⁴.)
    m = _second("""
        [inputs.X]
        distribution = "rectangular"
        low = 1.0
        high = 3.0
    """, 'Y = "X ** 3"')
    assert m.standard_uncertainty ** 2 == near(56.0, rel=1e-12)


def test_scaled_product_second_order_term():
    # Y = 3·X·Z, X on [1, 3] (μ 2, σ² 1/3), Z on [−1, 2] (μ 0.5, σ² 0.75), independent:
    # Var = 9·(σx²μz² + σz²μx² + σx²σz²) (moments of a product, by hand); ∂²Y/∂X∂Z = 3, so
    # this case tells ½f_ij² from ½|f_ij| (f_ij = 1 cannot)
    m = _second("""
        [inputs.X]
        distribution = "rectangular"
        low = 1.0
        high = 3.0
        [inputs.Z]
        distribution = "rectangular"
        low = -1.0
        high = 2.0
    """, 'Y = "3 * X * Z"')
    assert m.standard_uncertainty ** 2 == near(
        9 * ((1 / 3) * 0.25 + 0.75 * 4 + (1 / 3) * 0.75), rel=1e-12)


# ------------------------------------------------------------------ Allan deviation
def test_adev_counts_its_differences():
    # SP 1065 eq. 6: M = ⌊N/m⌋ block means give M − 1 first differences
    y = np.random.default_rng(2).normal(size=1000)
    c = allan.adev(y, [1, 3, 10])
    assert list(c.terms) == [999, 332, 99]


def test_non_integer_averaging_factor_is_refused():
    # an averaging factor counts samples (SP 1065 §2): 1.5 is meaningless
    with pytest.raises(ComputationError):
        allan.allan_curve(np.arange(100.0), "oadev", [1.5])


# ------------------------------------------------------------------ compare
def test_en_against_a_typed_in_reference_carries_its_uncertainty():
    # E_n = (x − x_ref)/√(U² + U_ref²) with U = 2u (ISO 13528, ISO/IEC 17043); run x = 1,
    # u = 0.3, reference 0.5 with U_ref = 0.8 (units of S): u(x − x_ref) = √(0.09 + 0.16) = 0.5,
    # E_n = 0.5/(2·0.5) = 0.5
    r = record_from_dict(record(1 * S, 0.3 * S))
    c = compare_runs([r], reference=ReferenceValue(0.5 * S, 0.8 * S), en_basis="2u")
    (e,) = c.en
    assert e.standard_uncertainty == near(0.5 * S, rel=1e-9)
    assert e.en == near(0.5, rel=1e-6)


def test_no_negative_weight_note_for_two_independent_runs():
    # independent runs: GLS weights 1/u_i² normalised, all positive (Aitken; common practice)
    c = compare_runs([record_from_dict(record(1 * S, 0.3 * S)),
                      record_from_dict(record(2 * S, 0.4 * S))])
    assert not any("negative weight" in n for n in c.notes)


# ------------------------------------------------------------------ pump models
def test_cascade_parameter_names():
    # one slope a and centres V_1..V_K, or a_k, V_k per step (the parametrisation of
    # Kashcheyevs & Kaestner 2010 with ln X_k = −a_k (V − V_k))
    assert CascadeModel(3, True).param_names == ("a", "V_1", "V_2", "V_3")
    assert CascadeModel(2, False).param_names == ("a_1", "V_1", "a_2", "V_2")


def test_escape_outcome_probabilities_by_hand():
    # two electrons, τ_1 = 1e-8 s, τ_2 = 1e-6 s, hold t = 1e-7 s (no gate dependence):
    # P(none ejected) = e^(−t/τ_1) = e^(−10); P(both) = P(T_1 + T_2 ≤ t), the hypoexponential
    # distribution function 1 − (λ_2 e^(−λ_1 t) − λ_1 e^(−λ_2 t))/(λ_2 − λ_1) (any probability
    # handbook); P(one) the rest.
    l1, l2, t = 1e8, 1e6, 1e-7
    p0 = math.exp(-l1 * t)
    p2 = 1 - (l2 * math.exp(-l1 * t) - l1 * math.exp(-l2 * t)) / (l2 - l1)
    p1 = 1 - p0 - p2
    m = EscapeModel(2, "none")
    theta = np.log([[1e-8, 1e-6]])
    out = m.outcome(theta, {"hold_time": t}, 1)
    assert out["p_exactly_n"] == near(p1, rel=1e-12)
    assert out["p_n_minus_1"] == near(p0, rel=1e-9)
    assert out["p_n_plus_1"] == near(p2, rel=1e-9)
    assert out["p_fewer"] == near(p0, rel=1e-9)
    assert out["p_more"] == near(p2, rel=1e-9)
    assert out["escape_times_s"] == near([1e-8, 1e-6], rel=1e-12)
    # on the second plateau nothing more can come: P(n + 1) = 0 (only two loaded)
    out2 = m.outcome(theta, {"hold_time": t}, 2)
    assert out2["p_n_plus_1"] == 0.0 and out2["p_more"] == 0.0
    assert out2["p_n_minus_1"] == near(p1, rel=1e-9)
