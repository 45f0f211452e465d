"""Per-trial cost of the Monte Carlo method on the whole of its work (issue 14, item 2):
the engine's ``monte_carlo`` against a bare numpy baseline that does the same work.

Run by hand (never in CI)::

    .venv/bin/python benchmarks/bench_mc_work.py            # 2^20 trials, 7 pairs
    .venv/bin/python benchmarks/bench_mc_work.py --quick    # 2^18 trials, 3 pairs

The model has 9 uncertain inputs of every kind the engine samples (normal, rectangular,
triangular, arcsine, trapezoidal, a normal with finite ν drawn as t_ν, a stated t) and a
correlated pair joined by the Gaussian copula (a rectangular and a normal, r = 0.6), and two
outputs. The baseline is plain numpy and scipy.special written out by hand: the same generator
and seed, the same chunks and draw order, the same sampling formulas (pseudo-random: JCGM 101
§6.4 formulas and the copula through an eigen-factor; RQMC: ``scipy.stats.qmc.Sobol`` points,
the same inverse distribution functions), both expressions by hand, then per output the mean,
standard deviation, sort, probabilistically symmetric and shortest 95 % intervals, the
histogram over the central 99.9 % and the fraction of trials inside y ± U, and the numerical
accuracy from batches (JCGM 101 §7.9: the statistics of 10 contiguous batches for pseudo-random
sampling, of 16 independent scrambles of trials/16 points each for RQMC). The script checks
that the two give bit-identical numbers, so the ratio is the engine's own overhead.

Timing: engine and baseline alternate in pairs within one process (``time.process_time``, every
step single-threaded, with ``time.perf_counter`` wall time alongside); the per-pair ratio is
shown as min/median/max.
"""

from __future__ import annotations

import argparse
import math
import statistics
import sys
import time
from pathlib import Path

import numpy as np
from scipy import special

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

R = 0.6
EXPR1 = "x0 * x1 / x2 + sqrt(x3) * exp(x4 / 10) + x5 * x6 ** 2 + x7 * x8 + x9 / (1 + x10 ** 2)"
EXPR2 = "log(x3) + x0 * x9 - x10 * x5"
LIMITS = {"Y1": (0.0, 4.0), "Y2": (-1.0, 3.0)}


def y1(v):
    return (v["x0"] * v["x1"] / v["x2"] + np.sqrt(v["x3"]) * np.exp(v["x4"] / 10)
            + v["x5"] * np.square(v["x6"]) + v["x7"] * v["x8"] + v["x9"] / (1 + np.square(v["x10"])))


def y2(v):
    return np.log(v["x3"]) + v["x0"] * v["x9"] - v["x10"] * v["x5"]


def setup():
    from budget.distributions import Distribution as D
    from budget.model import build_model
    from budget.quantity import Quantity
    specs = [("x0", D.normal(1.0, 0.01), math.inf), ("x1", D.rectangular(0.9, 1.1), math.inf),
             ("x2", D.normal(2.0, 0.1), 8.0),             # finite ν: drawn as t_8
             ("x3", D.triangular(1.0, 3.0, 1.5), math.inf), ("x4", D.arcsine(-0.5, 0.5), math.inf),
             ("x5", D.trapezoidal(0.0, 1.0, 0.4), math.inf),
             ("x6", D.student_t(1.0, 0.02, 5.0), 5.0), ("x7", D.normal(0.3, 0.05), math.inf),
             ("x8", D.normal(3.0, 0.3), 20.0),
             ("x9", D.rectangular(0.4, 0.8), math.inf), ("x10", D.normal(0.0, 1.0), math.inf)]
    qs = []
    for name, d, dof in specs:
        u = d.scale if d.kind == "student-t" else d.std
        qs.append(Quantity(name=name, value=d.mean, standard_uncertainty=u, distribution=d,
                           dof=dof))
    corr = np.eye(len(qs))
    corr[9, 10] = corr[10, 9] = R
    model = build_model({"Y1": EXPR1, "Y2": EXPR2}, quantities={q.name for q in qs},
                        constants={})
    return model, qs, corr


def engine(model, qs, corr, trials, seed, sampling):
    from budget.propagate.mcm import McmSettings, monte_carlo
    res = monte_carlo(model, qs, corr, McmSettings(trials=trials, seed=seed, sampling=sampling),
                      intervals=LIMITS)
    return {n: (r.value, r.standard_uncertainty, r.symmetric, r.shortest, r.histogram_counts,
                r.histogram_edges, r.interval_probabilities[n], r.accuracy.batches,
                (r.accuracy.value, r.accuracy.standard_uncertainty, *r.accuracy.symmetric,
                 *r.accuracy.shortest)) for n, r in res.items()}


# ----------------------------------------------------------------------- the baseline, by hand
T2 = (2.0, 0.1, 8.0)           # x2 as t_8 with scale u (JCGM 101 §6.4.9)
T8 = (3.0, 0.3, 20.0)
T6 = (1.0, 0.02, 5.0)


def draw_random(rng, m, fac):
    v = {"x0": rng.normal(1.0, 0.01, m), "x1": rng.uniform(0.9, 1.1, m),
         "x2": T2[0] + T2[1] * rng.standard_t(T2[2], m),
         "x3": rng.triangular(1.0, 1.5, 3.0, m),
         "x4": 0.0 + 0.5 * np.sin(2 * np.pi * rng.random(m))}
    r1, r2 = rng.random(m), rng.random(m)
    v["x5"] = 0.0 + 0.5 * ((1 + 0.4) * r1 + (1 - 0.4) * r2)
    v["x6"] = T6[0] + T6[1] * rng.standard_t(T6[2], m)
    v["x7"] = rng.normal(0.3, 0.05, m)
    v["x8"] = T8[0] + T8[1] * rng.standard_t(T8[2], m)
    z = rng.standard_normal((m, 2)) @ fac.T
    v["x9"] = 0.4 + 0.4 * special.ndtr(z[:, 0])
    v["x10"] = 0.0 + 1.0 * special.ndtri(special.ndtr(z[:, 1]))
    return v


def _tri_ppf(p, a, c, b):
    fc = (c - a) / (b - a)
    return np.where(p < fc, a + np.sqrt(p * (b - a) * (c - a)), b - np.sqrt((1 - p) * (b - a) * (b - c)))


def _trap_ppf(p, a, b, beta):
    h = 1.0 / (1 + beta)
    ramp = (1 - beta) / 2 * h
    q = np.minimum(p, 1 - p)
    zl = np.where(q < ramp, -1 + np.sqrt(2 * (1 - beta) * q / h), -beta + (q - ramp) / h)
    return (a + b) / 2 + (b - a) / 2 * np.where(p <= 0.5, zl, -zl)


def draw_sobol(u, fac):
    v = {"x0": 1.0 + 0.01 * special.ndtri(u[:, 0]), "x1": 0.9 + (1.1 - 0.9) * u[:, 1],
         "x2": T2[0] + T2[1] * special.stdtrit(T2[2], u[:, 2]),
         "x3": _tri_ppf(u[:, 3], 1.0, 1.5, 3.0),
         "x4": 0.0 - 0.5 * np.cos(np.pi * u[:, 4]),
         "x5": _trap_ppf(u[:, 5], 0.0, 1.0, 0.4),
         "x6": T6[0] + T6[1] * special.stdtrit(T6[2], u[:, 6]),
         "x7": 0.3 + 0.05 * special.ndtri(u[:, 7]),
         "x8": T8[0] + T8[1] * special.stdtrit(T8[2], u[:, 8])}
    z = special.ndtri(u[:, 9:11]) @ fac.T
    v["x9"] = 0.4 + 0.4 * special.ndtr(z[:, 0])
    v["x10"] = 0.0 + 1.0 * special.ndtri(special.ndtr(z[:, 1]))
    return v


def _intervals(y, p):
    """Symmetric and shortest 100p % intervals of sorted y (JCGM 101 §7.7), by hand."""
    n = y.size
    q = int(p * n + 0.5)
    r = (n - q) // 2 if (n - q) % 2 == 0 else (n - q + 1) // 2
    i = int(np.argmin(y[q:] - y[: n - q]))
    return (float(y[r - 1]), float(y[r + q - 1])), (float(y[i]), float(y[i + q]))


def baseline(trials, seed, sampling, chunk):
    from scipy.stats import qmc
    rng = np.random.default_rng(seed)
    w, vec = np.linalg.eigh(np.array([[1.0, R], [R, 1.0]]))
    fac = vec * np.sqrt(np.clip(w, 0.0, None))
    ys = {"Y1": np.empty(trials), "Y2": np.empty(trials)}
    p = 0.95
    # batches for the numerical accuracy (JCGM 101 §7.9): RQMC 16 independent scrambles of
    # trials/16 points each, pseudo-random 10 contiguous stretches of one stream
    h = 16 if sampling == "sobol" else 10
    if sampling == "sobol":
        size = trials // h
        bounds = [(i * size, (i + 1) * size) for i in range(h)]
        for a, b in bounds:
            pts = qmc.Sobol(11, scramble=True, bits=52, rng=rng)
            done = a
            while done < b:
                m = min(chunk, b - done)
                u = pts.random(m)
                u += 0.5 ** 53
                v = draw_sobol(u, fac)
                ys["Y1"][done:done + m] = y1(v)
                ys["Y2"][done:done + m] = y2(v)
                done += m
    else:
        done = 0
        while done < trials:
            m = min(chunk, trials - done)
            v = draw_random(rng, m, fac)
            ys["Y1"][done:done + m] = y1(v)
            ys["Y2"][done:done + m] = y2(v)
            done += m
        edges = np.linspace(0, trials, h + 1).astype(int)
        bounds = list(zip(edges[:-1], edges[1:]))
    out = {}
    for name, y in ys.items():
        stats = []
        for a, b in bounds:
            yb = np.sort(y[a:b])
            sym_b, short_b = _intervals(yb, p)
            stats.append((float(yb.mean()), float(yb.std(ddof=1)), *sym_b, *short_b))
        acc = np.array(stats).std(axis=0, ddof=1) / math.sqrt(h)
        mean, sd = float(y.mean()), float(y.std(ddof=1))
        y.sort()
        sym, short = _intervals(y, p)
        lo, hi = np.quantile(y, [0.0005, 0.9995])
        counts, edges_h = np.histogram(y, bins=80, range=(lo, hi))
        a, b = LIMITS[name]
        inside = float(np.searchsorted(y, b, side="right") - np.searchsorted(y, a, side="left")) / trials
        out[name] = (mean, sd, sym, short, tuple(int(c) for c in counts),
                     tuple(float(e) for e in edges_h), inside, h, tuple(float(x) for x in acc))
    return out


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true")
    args = ap.parse_args()
    from budget.propagate import mcm
    model, qs, corr = setup()
    trials, pairs = (1 << 18, 3) if args.quick else (1 << 20, 7)
    print(f"numpy {np.__version__}, {trials:,} trials, {pairs} pairs, 11 inputs, 2 outputs")
    ok = True
    rows = []
    for sampling in ("random", "sobol"):
        chunk = mcm.CHUNK if sampling == "random" else mcm._sobol_chunk(11)
        ce, cb, we, wb = [], [], [], []
        for k in range(pairs):
            order = (0, 1) if k % 2 == 0 else (1, 0)        # alternate who goes first
            for who in order:
                w0, c0 = time.perf_counter(), time.process_time()
                r = engine(model, qs, corr, trials, 7, sampling) if who == 0 else \
                    baseline(trials, 7, sampling, chunk)
                c, w = time.process_time() - c0, time.perf_counter() - w0
                (ce if who == 0 else cb).append(c)
                (we if who == 0 else wb).append(w)
                if who == 0:
                    re = r
                else:
                    rb = r
            if re != rb:
                ok = False
                print(f"MISMATCH ({sampling})")
        ratios = [a / b for a, b in zip(ce, cb)]
        rows.append((sampling, "/".join(f"{x:.2f}" for x in (min(ce), statistics.median(ce), max(ce))),
                     "/".join(f"{x:.2f}" for x in (min(cb), statistics.median(cb), max(cb))),
                     "/".join(f"{x:.2f}" for x in (min(ratios), statistics.median(ratios), max(ratios))),
                     f"{statistics.median(we):.2f} / {statistics.median(wb):.2f}"))
        print(rows[-1], flush=True)
    print()
    print("| sampling | engine CPU s (min/median/max) | baseline CPU s (min/median/max) "
          "| per-pair ratio (min/median/max) | wall s, medians (engine / baseline) |")
    print("|---|---|---|---|---|")
    for r in rows:
        print("| " + " | ".join(r) + " |")
    if not ok:
        print("\nThe engine and the baseline did not give identical numbers: ratios are void.")
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
