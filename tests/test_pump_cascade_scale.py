"""The decay cascade's error parts and deviation at the scale of a pump's error (issue 18).

Reference: tests/pump_sim.py's 60-digit decimal evaluation of Kashcheyevs & Kaestner's formula
(PRL 104, 186805, 2010): missed part Σ_(k≤n) (1 − e^(−X_k)), extra part Σ_(k>n) e^(−X_k),
⟨n⟩ − n = extra − missed. Compared in relative terms with no absolute floor (numeric.near):
a first-order missed part (X instead of 1 − e^(−X)) is wrong by X²/2, and a plain float
⟨n⟩ − n loses everything below 1.1e-16 (half an ulp of 1.0).
"""

from __future__ import annotations

import numpy as np
import pytest
from numeric import near
from pump_sim import cascade_parts_decimal

from budget.inputs.pump.cascade import CascadeModel

A, V1, V2 = 300.0, -0.60, -0.45           # invented; δ_2 = a·(V_2 − V_1) = 45
# from the rising edge (X_1 = e^(−a(V − V_1)) = e^3 at V = −0.61, 1 at V_1) to deep on the
# plateau (X_1 = e^(−30) ≈ 9.4e-14 at V = −0.50) and onto the next edge (V = −0.46)
VOLTS = [-0.61, -0.60, -0.598, -0.59, -0.57, -0.55, -0.53, -0.50, -0.48, -0.46]


@pytest.mark.parametrize("v", VOLTS)
def test_parts_and_deviation_against_60_digit_decimals(v):
    m = CascadeModel(2, True)
    theta = np.array([[A, V1, V2]])
    missed, extra, dev = cascade_parts_decimal(v, A, (V1, V2), 1)
    got_m, got_e = m.error_parts(theta, [v], 1)
    got_d = m.deviation_at(theta, [v], 1)[0]
    # rel 1e-12: a few roundings of exp/expm1 in float64 (≈ 1e-15 each) and nothing else
    assert got_m[0] == near(missed, rel=1e-12)
    assert got_e[0] == near(extra, rel=1e-12, abs=1e-300)    # e^(−X_2) underflows deep down
    assert got_d == near(dev, rel=1e-12)


def test_deviation_at_1e_13_scale():
    # V = −0.50: X_1 = e^(−30) = 9.358e-14, X_2 = e^(15) ≈ 3.3e6 so e^(−X_2) = 0:
    # ⟨n⟩ − 1 = −(1 − e^(−X_1)) = −9.358e-14 (derivation); in units of 1e-13 to 1e-12
    m = CascadeModel(2, True)
    got = m.deviation_at(np.array([[A, V1, V2]]), [-0.50], 1)[0]
    assert got / 1e-13 == near(-np.exp(-30.0) / 1e-13, rel=1e-12)
    # the same point through the per-step-slope parametrisation
    m2 = CascadeModel(2, False)
    got2 = m2.deviation_at(np.array([[A, V1, A, V2]]), [-0.50], 1)[0]
    assert got2 / 1e-13 == near(got / 1e-13, rel=1e-14)


def test_outcome_reports_the_exact_parts_on_the_edge():
    # at V = V_1 exactly X_1 = 1: missed = 1 − e^(−1) = 0.63212 (not X_1 = 1), extra e^(−e^45)=0
    m = CascadeModel(2, True)
    out = m.outcome(np.array([[A, V1, V2]]), {"gate_voltage": V1}, 1)
    assert out["p_missed"] == near(1 - np.exp(-1.0), rel=1e-12)
    assert out["p_extra"] == 0.0
