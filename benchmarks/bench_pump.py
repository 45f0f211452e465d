"""Pump characterisation benchmark (issue 4): plateau fit and sequential-escape probabilities.

Run by hand (never in CI)::

    .venv/bin/python benchmarks/bench_pump.py

What is measured, side by side in one run on one machine (times: minimum over the repeats):

1. Decay-cascade fit of a 2000-point synthetic plateau scan (three steps, noise 1e-4) with the
   package's analytic Jacobian (target < 0.5 s), next to the same fit with finite-difference
   Jacobians and next to ``scipy.optimize.curve_fit`` on the same data. For information, the
   whole ``analyse_data`` (CSV reading, fit, 20000 parameter samples, best operating point).
2. Sequential-escape probabilities for N = 1..6 at 10^5 (gate voltage, hold time) points,
   through ``EscapeModel.probabilities`` (escape times ~10× apart, gate slopes per electron;
   the closed form where it is accurate, the stable matrix exponential elsewhere). Target:
   < 0.2 s for N <= 6. Beside it: the stable matrix-exponential path forced on every point,
   and ``scipy.linalg.expm`` point by point (timed on 300 points, scaled to 10^5).
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

import numpy as np
import scipy.linalg
from scipy.optimize import curve_fit

from budget.inputs.pump.analysis import analyse_data
from budget.inputs.pump.cascade import CascadeModel
from budget.inputs.pump.escape import (
    BATEMAN_TOLERANCE,
    EscapeModel,
    bateman_probabilities,
    matrix_exponential_probabilities,
)
from budget.inputs.pump.fit import fit_least_squares

REPEATS = 5


def best_time(fn, repeats: int = REPEATS) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def bench_cascade() -> None:
    rng = np.random.default_rng(1)
    truth = np.array([310.0, -0.612, -0.547, -0.488])
    m = CascadeModel(3, True)
    v = np.linspace(-0.65, -0.47, 2000)
    y = m.predict(truth, v) + rng.normal(0, 1e-4, v.size)
    s = np.full(v.size, 1e-4)
    x0, _ = m.initial_guess(v, y)

    def ours():
        return fit_least_squares(m, lambda th: m.predict(th, v), y, s, x0,
                                 jac=lambda th: m.jacobian(th, v))

    def finite_diff():
        return fit_least_squares(m, lambda th: m.predict(th, v), y, s, x0)

    def scipy_curve_fit():
        return curve_fit(lambda x, a, c1, c2, c3: m.predict([a, c1, c2, c3], x), v, y, p0=x0,
                         sigma=s, absolute_sigma=True)

    assert np.allclose(ours().theta, scipy_curve_fit()[0], rtol=1e-6)
    with tempfile.TemporaryDirectory() as d:
        f = Path(d) / "scan.csv"
        f.write_text("gate_voltage,n_mean,n_std\n" + "".join(
            f"{float(a)!r},{float(b)!r},0.0001\n" for a, b in zip(v, y)))
        t_full = best_time(lambda: analyse_data(f, model="decay-cascade", plateau=1,
                                                operating_point=-0.575))
    t_ours, t_fd, t_cf = best_time(ours), best_time(finite_diff), best_time(scipy_curve_fit)
    print("1. decay-cascade fit, 2000 points, 4 parameters")
    print(f"   analytic Jacobian (package)        {t_ours * 1e3:8.1f} ms   target < 500 ms")
    print(f"   finite-difference Jacobian         {t_fd * 1e3:8.1f} ms   ratio {t_fd / t_ours:.2f}")
    print(f"   scipy.optimize.curve_fit           {t_cf * 1e3:8.1f} ms   ratio {t_cf / t_ours:.2f}")
    print(f"   whole analyse_data (20000 samples) {t_full * 1e3:8.1f} ms   (information)")


def _escape_row(N: int, rng: np.random.Generator, M: int) -> None:
    model = EscapeModel(N, "per-electron", 0.0)
    theta = np.r_[np.log(4e-9) + np.log(10.0) * np.arange(N),   # τ_k ~10× apart
                  np.linspace(45.0, 28.0, N)]                     # b_k in 1/V
    v = rng.uniform(-0.04, 0.04, M)
    t = np.exp(rng.uniform(np.log(1e-9), np.log(4e-9 * 10.0 ** N), M))
    kappa = (t[:, None] * np.exp(-model.ln_tau(theta[None, :], v)))[:, ::-1]
    t_auto = best_time(lambda: model.probabilities(theta, v, t))
    t_stable = best_time(lambda: matrix_exponential_probabilities(kappa), 2)
    sub = kappa[:300]

    def scipy_loop():
        for k in sub:
            A = np.diag(np.r_[0.0, -k]) + np.diag(k, 1)
            scipy.linalg.expm(A)
    t_scipy = best_time(scipy_loop, 1) * M / len(sub)
    share = float(np.mean(~(bateman_probabilities(kappa)[1] <= BATEMAN_TOLERANCE)))
    print(f"   {N}   {t_auto * 1e3:9.1f} ms   {t_stable * 1e3:12.1f} ms"
          f"   {t_scipy:22.1f} s   {100 * share:10.3f} %")


def bench_escape() -> None:
    rng = np.random.default_rng(2)
    print("2. sequential-escape probabilities at 10^5 (gate voltage, hold time) points")
    print("   N   package (auto)   stable path forced   scipy expm per point (scaled)"
          "   stable share")
    for N in range(1, 7):
        _escape_row(N, rng, 100_000)
    print("   target: package (auto) < 200 ms for every N <= 6")


def main() -> None:
    bench_cascade()
    print()
    bench_escape()


if __name__ == "__main__":
    main()
