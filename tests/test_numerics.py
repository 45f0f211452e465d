"""Numerical care: quantities of very different magnitude (1e-19 C with 1e9 Ω) and relative
deviations near 1e-10 must keep their digits through the model, the sensitivities and the
Monte Carlo method.

Reference: exact rational arithmetic (Python's fractions module) on the same binary inputs —
an independent computation with no rounding at all.
"""

from __future__ import annotations

import math
from fractions import Fraction

import pytest
from numeric import near

from budget import evaluate, parse_spec

E = 1.602176634e-19   # C, exact (SI Brochure, 9th ed.)
F = 600.0e6           # Hz
R = 1.00000032e9      # Ω
TRUE_DEV = 3.7e-10    # the relative deviation built into the voltage


def _spec(dev_expr: str) -> str:
    dv = E * F * R * (1 + TRUE_DEV)
    return f"""
[model]
I = "g * dV / R"
dev = "{dev_expr}"
[constants]
n = 1
[monte_carlo]
trials = 100000
seed = 7
[inputs.dV]
value = {dv!r}
standard_uncertainty = {dv * 1e-11!r}
unit = "V"
[inputs.g]
value = 1.0
standard_uncertainty = 1e-12
[inputs.R]
value = {R!r}
standard_uncertainty = {R * 1e-11!r}
unit = "Ω"
[inputs.f]
value = {F!r}
standard_uncertainty = 1e-3
unit = "Hz"
"""


def _exact_dev() -> Fraction:
    dv = E * F * R * (1 + TRUE_DEV)   # the same binary double the spec carries (repr round-trips)
    return Fraction(dv) / Fraction(R) / (Fraction(E) * Fraction(F)) - 1


@pytest.mark.parametrize("expr", ["I / (n * e * f) - 1", "(I - n * e * f) / (n * e * f)"])
def test_deviation_near_1e_10_keeps_its_digits(expr):
    b = evaluate(parse_spec(_spec(expr)))
    dev = b.measurand("dev")
    exact = float(_exact_dev())
    # float64 carries ~16 significant digits; a deviation of 3.7e-10 computed as a difference
    # keeps about 16 − 10 = 6 of them, so agreement to 1e-5 relative is the honest demand.
    assert dev.value == near(exact, rel=1e-5)
    assert exact == near(TRUE_DEV, rel=1e-5)   # the construction itself is sound


def test_sensitivities_across_magnitudes():
    # ∂dev/∂R = −dV·g/(R²·n·e·f), worked by hand; with u(R)/R = 1e-11 the contribution is
    # |c·u| = (1 + dev)·1e-11 ≈ 1e-11 — a check that the 1e-19 and 1e9 scales cancel exactly.
    b = evaluate(parse_spec(_spec("I / (n * e * f) - 1")))
    dev = b.measurand("dev")
    t = dev.term("R")
    assert t.contribution == near(1e-11 * (1 + TRUE_DEV), rel=1e-9)
    # u_c from the four relative terms (1e-11, 1e-12, 1e-11, 1e-3/6e8 ≈ 1.67e-12), hand-combined
    expected = math.sqrt(1e-22 + 1e-24 + 1e-22 + (1e-3 / F) ** 2) * (1 + TRUE_DEV)
    assert dev.standard_uncertainty == near(expected, rel=1e-6)


def test_monte_carlo_mean_of_small_deviation():
    b = evaluate(parse_spec(_spec("I / (n * e * f) - 1")))
    mc = b.mc("dev")
    u = b.measurand("dev").standard_uncertainty
    # The Monte Carlo mean must sit within 5 standard errors u/√M of the exact deviation
    # (M = 1e5 trials, u/√M ≈ 4.5e-14): evaluating I/(n·e·f) − 1 on samples must neither bias
    # nor blur the 3.7e-10 deviation.
    assert abs(mc.value - float(_exact_dev())) < 5 * u / math.sqrt(mc.trials)
