"""Sequential-escape model: master-equation solutions, limits, and recovery from simulated records.

Sources: the master equation dP_N/dt = −λ_N P_N, dP_m/dt = −λ_m P_m + λ_(m+1) P_(m+1) (DOMAIN
notes; Bateman's solution of a decay chain); the well-separated limit of Kashcheyevs &
Kaestner, Phys. Rev. Lett. 104, 186805 (2010); independent solvers from scipy
(scipy.linalg.expm, scipy.integrate.solve_ivp) and an 80-digit decimal evaluation of the closed
form (Python's decimal module). Simulated records draw exponential waiting times per electron
(a direct simulation of the escapes, independent of the master-equation code).
"""

from __future__ import annotations

import math
from decimal import Decimal, getcontext
from pathlib import Path

import numpy as np
import pytest
import scipy.linalg
from numeric import near
from pump_sim import escape_mean
from scipy import stats
from scipy.integrate import solve_ivp

from budget.inputs.pump.analysis import analyse_data
from budget.inputs.pump.escape import (
    EscapeModel,
    bateman_probabilities,
    matrix_exponential_probabilities,
    occupation_probabilities,
)


# ---------------------------------------------------------------------------- references
def rate_matrix(kappa: np.ndarray) -> np.ndarray:
    """Bidiagonal generator over occupations 0..N (t = 1), written out from the master equation."""
    N = len(kappa)
    A = np.zeros((N + 1, N + 1))
    for m in range(1, N + 1):
        A[m, m] = -kappa[m - 1]
        A[m - 1, m] = kappa[m - 1]
    return A


def ivp_solution(kappa: np.ndarray) -> np.ndarray:
    """scipy's 8th-order Runge-Kutta on the master equation, tight tolerances, t from 0 to 1."""
    A = rate_matrix(kappa)
    y0 = np.zeros(len(kappa) + 1)
    y0[-1] = 1.0
    sol = solve_ivp(lambda t, y: A @ y, (0.0, 1.0), y0, method="DOP853", rtol=1e-13,
                    atol=1e-16)
    assert sol.success
    return sol.y[:, -1]


def decimal_solution(kappa: np.ndarray) -> np.ndarray:
    """The Bateman closed form evaluated with 80 significant digits (no cancellation at 1e-16)."""
    getcontext().prec = 80
    lam = [Decimal(0)] + [Decimal(float(k)) for k in kappa]
    N = len(kappa)
    out = []
    for m in range(N + 1):
        num = Decimal(1)
        for j in range(m + 1, N + 1):
            num *= lam[j]
        acc = Decimal(0)
        for i in range(m, N + 1):
            den = Decimal(1)
            for j in range(m, N + 1):
                if j != i:
                    den *= lam[j] - lam[i]
            acc += (-lam[i]).exp() / den
        out.append(float(num * acc))
    return np.array(out)


def simulate_record(rng, tau_k, v, t, cycles):
    """Mean and standard error of the number ejected, from simulated escape waiting times.

    tau_k has shape (points, N): the mean waiting time of the k-th escape at each point.
    """
    waits = rng.exponential(tau_k[:, None, :], size=(len(t), cycles, tau_k.shape[1]))
    ejected = (np.cumsum(waits, axis=2) <= t[:, None, None]).sum(axis=2)
    mean = ejected.mean(axis=1)
    # floor: a point where every cycle gave the same count still has a resolution of 1/cycles
    std = np.maximum(ejected.std(axis=1, ddof=1) / math.sqrt(cycles), 1.0 / cycles)
    return mean, std


def write_record(path: Path, t, v, y, s) -> None:
    rows = [f"{float(a)!r},{float(b)!r},{float(c)!r},{float(d)!r}" for a, b, c, d in
            zip(t, v, y, s)]
    path.write_text("# synthetic escape record for a test\nhold_time_s,gate_voltage,n_mean,n_std\n"
                    + "\n".join(rows) + "\n")


# ---------------------------------------------------------------------------- solutions
SEPARATED = [  # κ = λ_m t by occupation 1..N, successive rates ~10× apart (charging energy)
    np.array([0.7]),
    np.array([0.05, 2.0]),
    np.array([0.02, 0.3, 4.0]),
    np.array([0.01, 0.12, 1.5, 9.0]),
    np.array([0.003, 0.04, 0.5, 4.0, 30.0]),
    np.array([0.001, 0.02, 0.2, 2.5, 20.0, 150.0]),
]


@pytest.mark.parametrize("kappa", SEPARATED, ids=lambda k: f"N={len(k)}")
def test_three_independent_solutions_agree(kappa):
    # closed form, matrix exponential (scipy's Padé expm, an outside library) and scipy's ODE
    # integrator agree to 1e-12 absolute (issue 4 check); the package's own positive-series
    # exponential is held to the same tolerance.
    closed, err = bateman_probabilities(kappa)
    assert err[0] < 1e-14                                    # the closed form trusts itself here
    expm = scipy.linalg.expm(rate_matrix(kappa))[:, -1]
    ivp = ivp_solution(kappa)
    ours = matrix_exponential_probabilities(kappa)[0]
    assert np.max(np.abs(closed[0] - expm)) < 1e-12
    assert np.max(np.abs(closed[0] - ivp)) < 1e-12
    assert np.max(np.abs(ours - ivp)) < 1e-12


CLOSE = [
    np.array([1.0, 1.0]),                                   # equal rates: closed form is 0/0
    np.array([2.0, 2.0 * (1 + 1e-9), 2.0 * (1 + 2e-9)]),
    np.array([0.3, 5.0, 5.0 * (1 + 1e-7), 0.31]),           # a close pair among distant rates
    np.array([0.05, 0.05 * (1 + 1e-6), 40.0, 40.0 * (1 + 1e-5), 0.9, 0.9 * (1 + 1e-8)]),
]


@pytest.mark.parametrize("kappa", CLOSE, ids=lambda k: f"N={len(k)}")
def test_close_rates_take_the_stable_path(kappa):
    # The default solver must match the ODE integrator and the 80-digit closed form to 1e-12,
    # where the float closed form flags itself as unreliable (its own error estimate).
    _, err = bateman_probabilities(kappa)
    assert not err[0] < 1e-14
    p = occupation_probabilities(kappa)[0]
    assert np.max(np.abs(p - ivp_solution(kappa))) < 1e-12
    if len(set(kappa.tolist())) == len(kappa):            # decimal closed form needs distinct rates
        assert np.max(np.abs(p - decimal_solution(kappa))) < 1e-12


def test_stable_path_against_decimal_on_random_hard_chains():
    # Rates spread over seven decades with near-degenerate pairs: the matrix-exponential path
    # stays within 1e-14 of the 80-digit closed form (measured worst case ~6e-16).
    rng = np.random.default_rng(5)
    worst = 0.0
    for _ in range(150):
        N = int(rng.integers(2, 7))
        k = 10 ** rng.uniform(-3, 4, N)
        i = int(rng.integers(0, N - 1))
        k[i + 1] = k[i] * (1 + 10 ** rng.uniform(-12, -1))
        worst = max(worst, float(np.max(np.abs(matrix_exponential_probabilities(k)[0]
                                                - decimal_solution(k)))))
    assert worst < 1e-14


def test_single_electron_is_one_exponential():
    # N = 1: P_1 = e^(−λt), P_0 = 1 − e^(−λt) (solution of dP_1/dt = −λ P_1).
    k = np.array([[0.0], [1e-6], [0.5], [3.0], [800.0]])
    p = occupation_probabilities(k)
    assert np.allclose(p[:, 1], np.exp(-k[:, 0]), rtol=1e-14, atol=0)
    assert np.allclose(p[:, 0], -np.expm1(-k[:, 0]), rtol=1e-12, atol=1e-16)


def test_probabilities_are_a_distribution():
    # Conservation of probability and positivity (derivation: the generator's columns sum to 0
    # and its off-diagonal entries are ≥ 0).
    rng = np.random.default_rng(11)
    k = np.exp(rng.normal(0, 3, (5000, 5)))
    p = occupation_probabilities(k)
    assert np.all(p >= -1e-15)
    assert np.allclose(p.sum(axis=1), 1.0, atol=1e-13)


# ---------------------------------------------------------------------------- limit
@pytest.mark.parametrize("separation", [1e2, 1e3, 1e4])
def test_well_separated_rates_give_exp_minus_X(separation):
    # Kashcheyevs & Kaestner (2010): with well-separated rates P(N ≥ n) ≈ exp(−X_n), X_n the
    # integrated escape rate of the n-th electron. Derivation of the tolerance: occupation ≥ n at
    # t means the waiting times at occupations N..n sum to more than t; with S the sum of the
    # faster ones and E ~ Exp(λ_n), e^(−X_n) ≤ P(S + E > t) ≤ e^(−X_n) E[e^(λ_n S)]
    # = e^(−X_n) Π_(j>n) λ_j/(λ_j − λ_n).
    N = 4
    lam = separation ** np.arange(N, dtype=float)          # λ_1 slowest ... λ_N fastest
    worst = 0.0
    for t in np.geomspace(0.01, 5.0, 25):
        p = occupation_probabilities(lam * t)[0]
        for n in range(1, N + 1):
            exact = p[n:].sum()
            approx = math.exp(-lam[n - 1] * t)
            bound = approx * (np.prod(lam[n:] / (lam[n:] - lam[n - 1])) - 1)
            assert approx - 1e-15 <= exact <= approx + bound + 1e-15
            worst = max(worst, exact - approx)
    # the bound above is e^(−X_n)(Π λ_j/(λ_j − λ_n) − 1) ≲ Σ_k s^(−k) = 1/(s − 1) for rates s×
    # apart (derivation); 1.2 allows the product's higher-order terms. It shrinks with s.
    assert worst <= 1.2 / (separation - 1)


# ---------------------------------------------------------------------------- fitting
TAU0 = np.array([5e-9, 6e-8, 1.2e-6])      # s, successive escape times ~10× apart
B = np.array([40.0, 30.0, 25.0])            # 1/V
V_REF = -0.30                               # V
GRID_V = np.repeat(np.linspace(-0.34, -0.26, 4), 18)
GRID_T = np.tile(np.geomspace(2e-9, 1.5e-5, 18), 4)


def _taus(tau0, b, v):
    return tau0[None, :] * np.exp(-b[None, :] * (v[:, None] - V_REF))


def test_recovery_and_coverage_across_seeds(tmp_path):
    # Synthetic escape records with known parameters (fixed seeds): each fitted parameter and δ
    # must lie within its uncertainty as often as a normal distribution says. Stated tolerance:
    # Σ z² over 30 seeds within the 0.05 %–99.95 % quantiles of χ²(30), and |z| ≤ 2 in at
    # least 24 of 30 seeds (expected 28.6; 24 is 3 binomial standard deviations below).
    seeds = range(30)
    truth = np.concatenate([np.log(TAU0), B])
    point = {"gate_voltage": V_REF, "hold_time": 3e-7}
    # truth: mean number ejected Σ_k P(T_1 + … + T_k ≤ t) in 80-digit decimals
    # (tests/pump_sim.py, hypoexponential distribution function), not the model's solver
    d_true = (escape_mean(_taus(TAU0, B, np.array([V_REF])), point["hold_time"])[0] - 2) / 2
    z = []
    for seed in seeds:
        rng = np.random.default_rng(1000 + seed)
        y, s = simulate_record(rng, _taus(TAU0, B, GRID_V), GRID_V, GRID_T, 3000)
        f = tmp_path / f"rec{seed}.csv"
        write_record(f, GRID_T, GRID_V, y, s)
        a = analyse_data(f, model="sequential-escape", plateau=2, operating_point=V_REF,
                         hold_time=3e-7, loaded=3, samples=2000, seed=seed)
        se = a.fit.std_errors
        z.append(list((a.fit.theta - truth) / se)
                 + [(a.prediction.mean - d_true) / a.prediction.std])
    z = np.asarray(z)
    lo, hi = stats.chi2.ppf([0.0005, 0.9995], len(seeds))
    for j in range(z.shape[1]):
        assert lo < np.sum(z[:, j] ** 2) < hi, j
        assert np.sum(np.abs(z[:, j]) <= 2) >= 24, j


def test_common_practice_order_of_magnitude_spacing(tmp_path):
    # Common practice: successive escape times differ by about an order of magnitude because of
    # the charging energy. A record simulated with 10× spacing yields fitted ratios within
    # [3, 30] and no flag; one simulated with 1.6× spacing is flagged in the notes.
    rng = np.random.default_rng(7)
    v = np.full(40, V_REF)
    t = np.geomspace(1e-9, 5e-5, 40)
    for tau0, ok in ((np.array([1e-8, 1e-7, 1e-6]), True),
                     (np.array([1e-7, 1.6e-7, 2.56e-7]), False)):
        y, s = simulate_record(rng, np.repeat(tau0[None, :], 40, axis=0), v, t, 20000)
        f = tmp_path / f"spacing_{ok}.csv"
        f.write_text("hold_time_s,n_mean,n_std\n" + "".join(
            f"{float(a)!r},{float(b)!r},{float(c)!r}\n" for a, b, c in zip(t, y, s)))
        a = analyse_data(f, model="sequential-escape", plateau=1, hold_time=1e-7, loaded=3,
                         samples=2000)
        ratios = a.findings["escape_time_ratios"]
        assert a.findings["escape_spacing_ok"] is ok
        if ok:
            assert all(3 <= r <= 30 for r in ratios)
        else:
            assert any("order-of-magnitude spacing" in n for n in a.notes)


def test_common_practice_exponential_gate_dependence(tmp_path):
    # Common practice: escape times depend exponentially on the gate voltage. Fitting each
    # voltage's simulated record on its own (no gate model) gives ln τ_k(V) that lie on a
    # straight line (χ² of the line acceptable at p > 0.001) whose slope is −b_k within 3 u.
    rng = np.random.default_rng(21)
    volts = np.linspace(-0.34, -0.26, 5)
    t = np.geomspace(2e-9, 1.5e-5, 24)
    ln_tau, u_ln = [], []
    for vv in volts:
        y, s = simulate_record(rng, _taus(TAU0, B, np.full(t.size, vv)), None, t, 4000)
        f = tmp_path / f"v{vv:.3f}.csv"
        f.write_text("hold_time_s,n_mean,n_std\n" + "".join(
            f"{float(a)!r},{float(b)!r},{float(c)!r}\n" for a, b, c in zip(t, y, s)))
        a = analyse_data(f, model="sequential-escape", plateau=2, hold_time=3e-7, loaded=3,
                         samples=1000)
        ln_tau.append(a.fit.theta)
        u_ln.append(a.fit.std_errors)
    ln_tau, u_ln = np.asarray(ln_tau), np.asarray(u_ln)
    for k in range(3):
        w = 1 / u_ln[:, k] ** 2
        coef, cov = np.polyfit(volts, ln_tau[:, k], 1, w=np.sqrt(w), cov="unscaled")
        chi2 = float(np.sum(w * (ln_tau[:, k] - np.polyval(coef, volts)) ** 2))
        assert stats.chi2.sf(chi2, len(volts) - 2) > 0.001
        assert abs(-coef[0] - B[k]) < 3 * math.sqrt(cov[0, 0])


def test_best_gate_voltage_is_a_maximum():
    # Self-consistency of the optimiser (not a value check of the model): at the returned
    # voltage P(exactly n) is not exceeded anywhere on a fine grid of the same model.
    model = EscapeModel(3, "per-electron", V_REF)
    theta = np.concatenate([np.log(TAU0), B])[None, :]
    best = model.best_gate_voltage(theta, 3e-7, 2, (-0.36, -0.24))
    grid = np.linspace(-0.36, -0.24, 20001)
    p = model.probabilities(theta, grid, np.full(grid.size, 3e-7))[:, 2]
    assert best["p_exactly_n"] >= p.max() - 1e-12
    assert -0.36 < best["gate_voltage"] < -0.24


def test_best_gate_voltage_flags_a_window_edge():
    # By construction: P(exactly n) has one maximum V* inside (−0.36, −0.24) (the test
    # above); a window that stops short of V* has its best point at its upper end, which the
    # result flags (project convention: the optimum is then not a plateau point); a window
    # around V* does not.
    model = EscapeModel(3, "per-electron", V_REF)
    theta = np.concatenate([np.log(TAU0), B])[None, :]
    inner = model.best_gate_voltage(theta, 3e-7, 2, (-0.36, -0.24))
    assert inner["at_edge"] is False
    v_star = inner["gate_voltage"]
    short = model.best_gate_voltage(theta, 3e-7, 2, (-0.36, v_star - 0.02))
    assert short["at_edge"] is True
    # the bounded search stops within (hi − lo)·1e-9 of the end; 1 µV is far inside a grid step
    assert short["gate_voltage"] == near(v_star - 0.02, rel=0, abs=1e-6)
    late = model.best_gate_voltage(theta, 3e-7, 2, (v_star + 0.02, -0.20))
    assert late["at_edge"] is True
    assert late["gate_voltage"] == near(v_star + 0.02, rel=0, abs=1e-6)


def test_parameter_names_follow_the_documented_order():
    # EscapeModel docstring (project convention): ln_tau0_k for k = 1..N, then b_k for
    # k = 1..N (per-electron), one b (shared) or nothing (none); units ln(s) and 1/V
    m = EscapeModel(3, "per-electron", 0.0)
    assert m.param_names == ("ln_tau0_1", "ln_tau0_2", "ln_tau0_3", "b_1", "b_2", "b_3")
    assert m.param_units == ("ln(s)",) * 3 + ("1/V",) * 3
    assert EscapeModel(2, "shared", 0.0).param_names == ("ln_tau0_1", "ln_tau0_2", "b")
    assert EscapeModel(2, "none", 0.0).param_names == ("ln_tau0_1", "ln_tau0_2")
