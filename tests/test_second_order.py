"""Second-order terms for non-normal inputs (issue 11 item 5).

For a model that is at most quadratic in each input the fourth-order Taylor variance of
budget/propagate/lpu.py is exact, so the oracles are exact moments: of the rectangular
distribution (E[X⁴] = 1/5 on [−1, 1], by integration), and of scipy.stats.triang,
scipy.stats.trapezoid and scipy.stats.arcsine (open reference library). The kurtosis and
skewness of every kind are checked against scipy.stats as well.
"""

from __future__ import annotations

import math
import textwrap

import numpy as np
import pytest
from numeric import near
from scipy import stats

from budget import evaluate
from budget.distributions import Distribution
from budget.errors import SpecError
from budget.spec import parse_spec


def second(inputs: str, model: str = 'Y = "X * X"', mc: bool = False):
    text = textwrap.dedent("""
        [budget]
        propagation_order = 2
        [model]
        {model}
        [monte_carlo]
        enabled = {mc}
        trials = 1000000
        seed = 77
    """).format(model=model, mc="true" if mc else "false") + textwrap.dedent(inputs)
    return evaluate(parse_spec(text, file="spec.toml"))


def test_square_of_rectangular_issue_case():
    # issue 11 item 5: Y = X·X, X rectangular on [−1, 1]: Var(X²) = E[X⁴] − E[X²]² = 1/5 − 1/9
    # (moments of the uniform distribution by integration), u = 0.298, not 0.47 (normal formula)
    b = second("""
        [inputs.X]
        distribution = "rectangular"
        low = -1.0
        high = 1.0
    """, mc=True)
    m = b.measurand("Y")
    assert m.standard_uncertainty == near(math.sqrt(1 / 5 - 1 / 9), rel=1e-12)
    assert round(m.standard_uncertainty, 3) == 0.298
    assert any("skewness and kurtosis" in n and n.endswith(": X") for n in b.run["notes"])
    # synthetic truth: the Monte Carlo standard deviation of X² agrees (10⁶ trials: ±0.2 %)
    assert b.mc("Y").standard_uncertainty == near(math.sqrt(1 / 5 - 1 / 9), rel=3e-3)


@pytest.mark.parametrize("table,ref", [
    # asymmetric triangular on [0, 10] with mode 2 (skewness enters through μ₃)
    ('distribution = "triangular"\nlow = 0.0\nhigh = 10.0\nvalue = 2.0',
     stats.triang(0.2, loc=0.0, scale=10.0)),
    # trapezoid on [1, 3] with β = 0.4: scipy's trapezoid(c, d) with c = 0.3, d = 0.7
    ('distribution = "trapezoidal"\nlow = 1.0\nhigh = 3.0\nbeta = 0.4',
     stats.trapezoid(0.3, 0.7, loc=1.0, scale=2.0)),
    ('distribution = "arcsine"\nlow = 0.5\nhigh = 2.5', stats.arcsine(loc=0.5, scale=2.0)),
])
def test_square_is_exact_for_every_kind(table, ref):
    # Var(X²) = E[X⁴] − E[X²]² from scipy.stats' moments: the formula is exact for a quadratic
    m = second("[inputs.X]\n" + table).measurand("Y")
    exact = ref.moment(4) - ref.moment(2) ** 2
    assert m.standard_uncertainty ** 2 == near(exact, rel=1e-10)


def test_product_of_two_rectangulars():
    # Var(XZ) = σx²μz² + σz²μx² + σx²σz² for independent X, Z (moments of a product, by hand):
    # X on [1, 3] (μ 2, σ² 1/3), Z on [−1, 2] (μ 0.5, σ² 0.75)
    m = second("""
        [inputs.X]
        distribution = "rectangular"
        low = 1.0
        high = 3.0
        [inputs.Z]
        distribution = "rectangular"
        low = -1.0
        high = 2.0
    """, model='Y = "X * Z"').measurand("Y")
    assert m.standard_uncertainty ** 2 == near(
        (1 / 3) * 0.25 + 0.75 * 4 + (1 / 3) * 0.75, rel=1e-12)


def test_heavy_tailed_input_refused():
    with pytest.raises(SpecError, match="fourth moment") as e:
        second("""
            [inputs.X]
            distribution = "student-t"
            value = 1.0
            standard_uncertainty = 0.1
            dof = 3
        """)
    assert e.value.field == "budget.propagation_order"


@pytest.mark.parametrize("dist,ref", [
    (Distribution.rectangular(-1, 2), stats.uniform(-1, 3)),
    (Distribution.triangular(0, 10, 7), stats.triang(0.7, 0, 10)),
    (Distribution.arcsine(0, 1), stats.arcsine()),
    (Distribution.trapezoidal(0, 1, 0.25), stats.trapezoid(0.375, 0.625)),
    (Distribution.student_t(0, 1, 9), stats.t(9)),
    (Distribution.normal(0, 1), stats.norm()),
])
def test_shape_moments_match_scipy(dist, ref):
    s, k = ref.stats(moments="sk")
    assert dist.skewness == near(float(s), abs=1e-12)
    assert dist.kurtosis == near(float(k) + 3, rel=1e-12)      # scipy gives excess
    assert np.isfinite(dist.kurtosis)
