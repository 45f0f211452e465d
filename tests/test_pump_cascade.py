"""Decay-cascade model (Kashcheyevs & Kaestner, Phys. Rev. Lett. 104, 186805, 2010): formula,
best operating point, fit against scipy.optimize.curve_fit, and recovery across seeds.

Synthetic staircases are generated in the tests from known parameters with fixed seeds, by
the formula written out here and in tests/pump_sim.py, never by ``CascadeModel`` itself (a wrong
model formula must fail the recovery tests, not produce its own truth).
"""

from __future__ import annotations

import math
from decimal import Decimal, getcontext
from pathlib import Path

import numpy as np
import pytest
from numeric import near
from pump_sim import cascade_parts_decimal
from pump_sim import staircase as sim_staircase
from scipy import stats
from scipy.optimize import curve_fit

from budget.inputs.pump.analysis import analyse_data
from budget.inputs.pump.cascade import CascadeModel

# invented but typical: step width ~3/a ≈ 10 mV, δ_2 = a (V_2 − V_1) = 20
A_TRUE, V1, V2, V3 = 300.0, -0.60, -0.60 + 20 / 300.0, -0.47


def staircase(v, a=A_TRUE, centres=(V1, V2, V3)):
    """⟨n⟩ = Σ exp(−exp(−a (V − V_k))) written out directly from the paper's formula."""
    return sum(np.exp(-np.exp(-a * (v - c))) for c in centres)


def write_scan(path: Path, v, y, s=None) -> Path:
    head = "gate_voltage,n_mean" + (",n_std" if s is not None else "")
    rows = [f"{float(a)!r},{float(b)!r}" + (f",{float(c)!r}" if s is not None else "")
            for a, b, c in zip(v, y, s if s is not None else v)]
    path.write_text("# synthetic plateau scan for a test\n" + head + "\n" + "\n".join(rows) + "\n")
    return path


def test_model_matches_the_published_formula():
    # ⟨n⟩(V) = Σ_k exp(−exp(−a(V − V_k))) (Kashcheyevs & Kaestner 2010, with ln X_k = −aV + Δ_k).
    m = CascadeModel(3, True)
    v = np.linspace(-0.65, -0.44, 500)
    assert np.allclose(m.predict([A_TRUE, V1, V2, V3], v), staircase(v), rtol=0, atol=1e-15)
    # at V = V_k step k stands at e^(−1) of its height (derivation: X_k = 1 there)
    assert m.predict([A_TRUE, V1, V2, V3], [V1])[0] == near(math.exp(-1), abs=1e-9)


def test_jacobian_matches_finite_differences():
    # Derivation check of the analytic ∂⟨n⟩/∂θ against central differences.
    for shared in (True, False):
        m = CascadeModel(3, shared)
        theta = np.array([A_TRUE, V1, V2, V3]) if shared else \
            np.array([300.0, V1, 280.0, V2, 320.0, V3])
        v = np.linspace(-0.64, -0.45, 97)
        J = m.jacobian(theta, v)
        h = 1e-7 * np.maximum(1, np.abs(theta))
        num = np.column_stack([(m.predict(theta + e, v) - m.predict(theta - e, v)) / (2 * hh)
                               for e, hh in zip(np.diag(h), h)])
        assert np.allclose(J, num, rtol=1e-5, atol=1e-6)


def test_deviation_keeps_tiny_errors():
    # ⟨n⟩ − 1 deep on the first plateau computed with 60-digit decimals (Python's decimal
    # module) as the reference: the package keeps 1e-12 relative accuracy where a plain float
    # ⟨n⟩ − 1 would have none left.
    getcontext().prec = 60
    m = CascadeModel(2, True)
    theta = np.array([300.0, -0.60, -0.45])
    for v in (-0.53, -0.52, -0.50):
        ref = Decimal(0)
        for k, c in enumerate((-0.60, -0.45)):
            x = (-Decimal(300.0) * (Decimal(v) - Decimal(c))).exp()
            ref += (-x).exp() - (1 if k == 0 else 0)
        got = m.deviation_at(theta[None, :], [v], 1)[0]
        assert got == near(float(ref), rel=1e-12)


@pytest.mark.parametrize("fom", [12.0, 20.0, 30.0])
def test_best_point_follows_delta_two(fom):
    # Kashcheyevs & Kaestner (2010) (memory): on the first plateau the best error is roughly
    # δ_2·e^(−δ_2). Derivation of the check: with X_2 = X_1 e^(δ_2) and 1 − e^(−X_1) ≈ X_1, the
    # total error X_1 + e^(−X_2) is smallest at X_2 = δ_2, i.e. V* = V_2 − ln(δ_2)/a, where it
    # equals (1 + δ_2) e^(−δ_2); the neglected X_1²/2 changes it by < δ_2² e^(−2δ_2).
    a, v1 = 300.0, -0.60
    v2 = v1 + fom / a
    m = CascadeModel(2, True)
    best = m.best_gate_voltage(np.array([[a, v1, v2]]), 1)
    assert best["error_probability"] == near((1 + fom) * math.exp(-fom), rel=1e-9,
                                                      abs=fom ** 2 * math.exp(-2 * fom))
    assert best["gate_voltage"] == near(v2 - math.log(fom) / a, abs=1e-7)
    assert m.figure_of_merit(np.array([[a, v1, v2]]), 1) == near(fom, rel=1e-12)


def test_common_practice_parts_have_opposite_signs():
    # DOMAIN notes / common practice: on the plateau the missed-electron error (negative) and the
    # extra-electron error (positive) have opposite signs; δ crosses zero between V_1 and V_2.
    m = CascadeModel(2, True)
    theta = np.array([[300.0, V1, V2]])
    best = m.best_gate_voltage(theta, 1)
    zc = best["zero_crossing"]
    assert V1 < zc < V2
    assert m.deviation_at(theta, [zc - 0.005], 1)[0] < 0 < m.deviation_at(theta, [zc + 0.003],
                                                                           1)[0]
    assert abs(m.deviation_at(theta, [zc], 1)[0]) < 1e-15


@pytest.mark.parametrize("weighted", [True, False])
def test_fit_agrees_with_curve_fit(tmp_path, weighted):
    # Oracle: scipy.optimize.curve_fit on the same data gives the same parameters and the same
    # covariance (absolute_sigma=True with n_std and reduced χ² ≤ 1; False when unweighted).
    rng = np.random.default_rng(3)
    v = np.linspace(-0.64, -0.455, 300)
    s = np.full(v.size, 2e-4)
    y = staircase(v) + rng.normal(0, 1e-4, v.size)      # scatter below the stated n_std
    f = write_scan(tmp_path / "scan.csv", v, y, s if weighted else None)
    a = analyse_data(f, model="decay-cascade", plateau=1, operating_point=-0.545, steps=3,
                     samples=1000)
    popt, pcov = curve_fit(lambda x, aa, c1, c2, c3: staircase(x, aa, (c1, c2, c3)), v, y,
                           p0=[290, -0.601, -0.534, -0.471], sigma=s if weighted else None,
                           absolute_sigma=weighted, xtol=1e-14, ftol=1e-14)
    assert np.allclose(a.fit.theta, popt, rtol=1e-7, atol=1e-10)
    assert np.allclose(a.fit.cov, pcov, rtol=1e-4, atol=0)
    assert a.fit.weighted is weighted
    assert ("not scaled" in a.fit.scale_reason) is weighted


def test_covariance_scaled_when_scatter_exceeds_n_std(tmp_path):
    # Issue 4 rule: with n_std given, scale by the reduced χ² only when it exceeds 1, and say so.
    # Here the stated n_std is 3× too small, so the reduced χ² is about 9 (derivation).
    rng = np.random.default_rng(4)
    v = np.linspace(-0.64, -0.455, 300)
    y = staircase(v) + rng.normal(0, 3e-4, v.size)
    f = write_scan(tmp_path / "scan.csv", v, y, np.full(v.size, 1e-4))
    a = analyse_data(f, model="decay-cascade", plateau=1, operating_point=-0.545, steps=3,
                     samples=1000)
    # expected 9 (3²); χ²_ν/ν with ν = 296 has sd 9·√(2/296) ≈ 0.74, so [7, 11] is ±2.7 sd
    assert 7 < a.fit.reduced_chi2 < 11
    assert a.fit.scale == near(a.fit.reduced_chi2)
    assert any("reduced χ²" in n and "> 1" in n for n in a.notes)


@pytest.mark.parametrize("shared", [True, False])
def test_recovery_and_coverage_across_seeds(tmp_path, shared):
    # Synthetic staircases with known parameters: parameters and δ_pump recovered within their
    # uncertainties. Stated tolerance: Σ z² over 60 seeds inside the 0.05 %–99.95 % quantiles of
    # χ²(60), and |z| ≤ 2 in at least 51 of 60 (expected 57.3; 51 is 4 binomial sd below).
    truth = np.array([300.0, V1, V2]) if shared else np.array([300.0, V1, 260.0, V2])
    v = np.linspace(-0.64, -0.50, 160)
    v_op = -0.545
    slopes = (300.0,) if shared else (300.0, 260.0)
    # truth from the 60-digit evaluation of the published formula (tests/pump_sim.py)
    d_true = cascade_parts_decimal(v_op, slopes, (V1, V2), 1)[2]
    z = []
    for seed in range(60):
        rng = np.random.default_rng(500 + seed)
        y = sim_staircase(v, slopes, (V1, V2)) \
            + rng.normal(0, 1e-3, v.size)
        f = write_scan(tmp_path / f"s{seed}.csv", v, y, np.full(v.size, 1e-3))
        a = analyse_data(f, model="decay-cascade", plateau=1, operating_point=v_op, steps=2,
                         shared_slope=shared, samples=4000, seed=seed)
        z.append(list((a.fit.theta - truth) / a.fit.std_errors)
                 + [(a.prediction.mean - d_true) / a.prediction.std])
    z = np.asarray(z)
    lo, hi = stats.chi2.ppf([0.0005, 0.9995], 60)
    for j in range(z.shape[1]):
        assert lo < np.sum(z[:, j] ** 2) < hi, j
        assert np.sum(np.abs(z[:, j]) <= 2) >= 51, j


def test_linear_and_sampled_uncertainty_both_reported(tmp_path):
    # The double exponential makes the linear propagation unreliable deep on the plateau: with
    # coarse, noisy data the two differ there, and the note says so; near the step edge, where
    # δ is close to linear in the parameters over their uncertainty, they agree within 5 %.
    rng = np.random.default_rng(8)
    v = np.linspace(-0.64, -0.50, 40)
    y = sim_staircase(v, 300.0, (V1, V2)) + rng.normal(0, 2e-2, v.size)
    f = write_scan(tmp_path / "coarse.csv", v, y, np.full(v.size, 2e-2))
    deep = analyse_data(f, model="decay-cascade", plateau=1, operating_point=-0.545, steps=2)
    at_edge = analyse_data(f, model="decay-cascade", plateau=1, operating_point=-0.59, steps=2)
    assert deep.prediction.differs
    assert any("linear propagation gives" in n for n in deep.notes)
    assert not at_edge.prediction.differs
    assert at_edge.prediction.linear_std == near(at_edge.prediction.std, rel=0.05)


def test_initial_guess_from_the_linearised_edges():
    # cascade.initial_guess (project convention for the fit's starting θ): on an isolated edge
    # ln(−ln(⟨n⟩ − k + 1)) = −a_k(V − V_k) is a straight line in V (Kashcheyevs & Kaestner's
    # double exponential, tests/pump_sim.staircase). Truth a = 40/V, V_1 = −0.60 V,
    # V_2 = −0.40 V. Step 1 has 21 points on its edge: line fit, exact to rounding (step 2's
    # term there is below e^(−54)); step 2 one point at −0.41 V: V + ln(−ln(⟨n⟩ − 1))/a with
    # a from step 1, off only by step 1's tail at −0.41 V (1 − ⟨n_1⟩ = e^(−7.6) = 5e-4 of a
    # step, i.e. some 1e-5 V): bound 1e-3 V, against 0.01 V for the raw voltage
    m = CascadeModel(2, False)
    v = np.concatenate([np.linspace(-0.70, -0.50, 21), [-0.45, -0.41, -0.30, -0.25]])
    theta, missing = m.initial_guess(v, sim_staircase(v, [40.0, 40.0], [-0.60, -0.40]))
    assert missing == []
    assert theta[0] == near(40.0, rel=1e-6) and theta[1] == near(-0.60, rel=1e-6)
    assert theta[2] == near(40.0, rel=1e-6)
    assert theta[3] == near(-0.40, rel=0, abs=1e-3)
    # exactly two points on an edge still give its line (two points fix it), here exact
    v2 = np.array([-0.8, -0.62, -0.58, -0.5, -0.25])
    theta2, _ = m.initial_guess(v2, sim_staircase(v2, [40.0, 40.0], [-0.60, -0.40]))
    assert theta2[0] == near(40.0, rel=1e-6) and theta2[1] == near(-0.60, rel=1e-6)
    # every edge with a single point: no slope can be fitted; the convention takes
    # a = ±3K/span(V) (K = 2 steps, span 0.5 V: 12/V), its sign that of the data's trend
    v3 = np.array([-0.8, -0.61, -0.5, -0.41, -0.3])
    up, _ = m.initial_guess(v3, sim_staircase(v3, [40.0, 40.0], [-0.60, -0.40]))
    down, _ = m.initial_guess(v3, sim_staircase(-v3, [40.0, 40.0], [0.60, 0.40]))
    assert (up[0], up[2]) == (near(12.0, rel=1e-12), near(12.0, rel=1e-12))
    assert (down[0], down[2]) == (near(-12.0, rel=1e-12), near(-12.0, rel=1e-12))
