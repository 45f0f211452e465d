"""Engine benchmark (issue 2 item 10): Monte Carlo speed and memory, linear propagation speed.

Run by hand (never in CI)::

    .venv/bin/python benchmarks/bench_engine.py            # full table (about a minute)
    .venv/bin/python benchmarks/bench_engine.py --quick    # 10^6 only, fewer repeats

What is measured, side by side in one run on one machine:

1. Monte Carlo of a 20-input nonlinear model through ``budget.propagate.mcm.monte_carlo`` against
   a bare numpy baseline that draws the same variates (same generator, seed, chunking and draw
   order, same sampling formulas), evaluates the same expression written by hand in numpy and
   takes the same statistics (mean, standard deviation, sort, probabilistically symmetric and
   shortest 95 % intervals). Both must give identical numbers — checked — so the ratio is the
   engine's overhead alone. Target: ratio <= 1.5 at 10^6 and 10^7 trials.
2. Peak memory of ``monte_carlo`` at 10^7 trials: the peak resident set size of a fresh
   subprocess (VmHWM from /proc/self/status; ``resource.getrusage`` elsewhere — on Linux its
   ru_maxrss keeps the parent's high-water mark across fork and exec, so it is not used there),
   shown with the same figure for the imports alone and for the baseline. Target: <= 500 MB.
3. Linear propagation of a 100-input nonlinear model: ``propagate_linear`` alone (target
   < 0.2 s) and, for information, the whole ``budget.evaluate`` of the same spec without Monte
   Carlo (spec parsing, inputs, model, propagation, written-out derivatives).
4. For information: the adaptive procedure (JCGM 101 §7.9) against a fixed run of the same
   number of trials.

Times are the minimum over the repeats (the least disturbed run). The Monte Carlo ratio is taken
from the process CPU time (all steps are single-threaded numpy), with wall time alongside, so
that other work on a shared machine does not tilt it.
"""

from __future__ import annotations

import argparse
import json
import math
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

# (name, kind, parameters) — 20 inputs over every kind of distribution the engine samples
INPUTS = [
    ("x0", "normal", (1.0, 0.01)), ("x1", "rectangular", (0.9, 1.1)),
    ("x2", "normal", (2.0, 0.1)), ("x3", "rectangular", (1.0, 2.0)),
    ("x4", "triangular", (-1.0, 0.0, 1.0)), ("x5", "triangular", (1.0, 1.5, 3.0)),
    ("x6", "arcsine", (-0.5, 0.5)), ("x7", "normal", (0.3, 0.05)),
    ("x8", "trapezoidal", (0.0, 1.0, 0.4)), ("x9", "student-t", (1.0, 0.02, 8.0)),
    ("x10", "normal", (3.0, 0.3)), ("x11", "rectangular", (0.5, 0.7)),
    ("x12", "normal", (0.0, 1.0)), ("x13", "arcsine", (-2.0, 2.0)),
    ("x14", "normal", (0.1, 0.5)), ("x15", "triangular", (0.0, 1.0, 2.0)),
    ("x16", "normal", (1.0, 0.2)), ("x17", "rectangular", (0.0, 0.5)),
    ("x18", "student-t", (2.0, 0.1, 5.0)), ("x19", "normal", (5.0, 0.2)),
]
EXPR = ("x0 * x1 / x2 + sqrt(x3) * exp(x4 / 10) + log(x5) * x6 ** 2 + sin(x7) * cos(x8)"
        " + x9 * x10 * x11 / (1 + x12 ** 2) + arctan(x13) + tanh(x14) * x15"
        " + (x16 - x17) ** 3 + x18 / x19")


def expr_numpy(v: dict) -> np.ndarray:
    """EXPR written by hand in numpy (the baseline's model)."""
    return (v["x0"] * v["x1"] / v["x2"] + np.sqrt(v["x3"]) * np.exp(v["x4"] / 10)
            + np.log(v["x5"]) * np.square(v["x6"]) + np.sin(v["x7"]) * np.cos(v["x8"])
            + v["x9"] * v["x10"] * v["x11"] / (1 + np.square(v["x12"])) + np.arctan(v["x13"])
            + np.tanh(v["x14"]) * v["x15"] + np.power(v["x16"] - v["x17"], 3)
            + v["x18"] / v["x19"])


def draw_numpy(rng: np.random.Generator, kind: str, par: tuple, m: int) -> np.ndarray:
    """The baseline's variates: plain numpy calls with the sampling formulas of JCGM 101 §6.4."""
    if kind == "normal":
        return rng.normal(par[0], par[1], m)
    if kind == "rectangular":
        return rng.uniform(par[0], par[1], m)
    if kind == "triangular":
        return rng.triangular(par[0], par[1], par[2], m)
    if kind == "arcsine":
        a, b = par
        return (a + b) / 2 + (b - a) / 2 * np.sin(2 * np.pi * rng.random(m))
    if kind == "trapezoidal":
        a, b, beta = par
        r1, r2 = rng.random(m), rng.random(m)
        return a + (b - a) / 2 * ((1 + beta) * r1 + (1 - beta) * r2)
    if kind == "student-t":
        return par[0] + par[1] * rng.standard_t(par[2], m)
    raise ValueError(kind)


def baseline(trials: int, seed: int, chunk: int, p: float = 0.95) -> tuple:
    rng = np.random.default_rng(seed)
    y = np.empty(trials)
    done = 0
    while done < trials:
        m = min(chunk, trials - done)
        v = {name: draw_numpy(rng, kind, par, m) for name, kind, par in INPUTS}
        y[done:done + m] = expr_numpy(v)
        done += m
    mean, sd = float(y.mean()), float(y.std(ddof=1))
    y.sort()
    q = int(p * trials + 0.5)
    r = (trials - q) // 2 if (trials - q) % 2 == 0 else (trials - q + 1) // 2
    sym = (float(y[r - 1]), float(y[r + q - 1]))
    i = int(np.argmin(y[q:] - y[: trials - q]))
    return mean, sd, sym, (float(y[i]), float(y[i + q]))


def engine_setup():
    from budget.distributions import Distribution
    from budget.model import build_model
    from budget.quantity import Quantity
    makers = {"normal": Distribution.normal, "rectangular": Distribution.rectangular,
              "triangular": lambda a, c, b: Distribution.triangular(a, b, c),
              "arcsine": Distribution.arcsine, "trapezoidal": Distribution.trapezoidal,
              "student-t": Distribution.student_t}
    qs = []
    for name, kind, par in INPUTS:
        d = makers[kind](*par)
        # student-t inputs: dof stated, scale as the "standard uncertainty" like the spec does
        u = d.scale if kind == "student-t" else d.std
        qs.append(Quantity(name=name, value=d.mean, standard_uncertainty=u, distribution=d,
                           dof=d.dof if kind == "student-t" else math.inf))
    model = build_model({"Y": EXPR}, quantities={q.name for q in qs}, constants={})
    return model, qs


def engine(trials: int, seed: int) -> tuple:
    from budget.propagate.mcm import McmSettings, monte_carlo
    model, qs = engine_setup()
    r = monte_carlo(model, qs, np.eye(len(qs)), McmSettings(trials=trials, seed=seed))["Y"]
    return r.value, r.standard_uncertainty, r.symmetric, r.shortest


def timed(fn, *args) -> tuple[float, tuple]:
    t0 = time.perf_counter()
    out = fn(*args)
    return time.perf_counter() - t0, out


def cpu_timed(fn, *args) -> tuple[float, float, tuple]:
    """(wall s, CPU s of this process, result). Every step here is single-threaded numpy, so
    the process CPU time is the work done, undisturbed by other processes on a shared machine."""
    w0, c0 = time.perf_counter(), time.process_time()
    out = fn(*args)
    return time.perf_counter() - w0, time.process_time() - c0, out


# --------------------------------------------------------------------------- memory (subprocess)
def memory_child(what: str, trials: int) -> None:
    if what == "engine":
        engine(trials, 1)
    elif what == "baseline":
        from budget.propagate.mcm import CHUNK
        baseline(trials, 1, CHUNK)
    else:   # imports only
        engine_setup()
    print(json.dumps({"what": what, "peak_rss_mb": _peak_rss_mb()}))


def _peak_rss_mb() -> float:
    status = Path("/proc/self/status")
    if status.exists():                          # Linux: high-water mark of this process image
        for line in status.read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024          # kB
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return rss / 1024 / (1024 if sys.platform == "darwin" else 1)  # bytes on macOS, kB else


def peak_rss(what: str, trials: int) -> float:
    out = subprocess.run([sys.executable, __file__, "--memory-child", what, str(trials)],
                         capture_output=True, text=True, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])["peak_rss_mb"]


# --------------------------------------------------------------------------- linear propagation
def lpu_spec(n: int) -> str:
    """A nonlinear n-input model; above 300 inputs the sum of products Σ x_i·x_(i+1) + √x0·e^(x1/10)
    (the rational terms would pass the 20 000-character limit on a model's text), in groups of
    50 terms (a flat sum of 1000 terms nests 1000 levels deep, past the parser's limit)."""
    if n > 300:
        t = [f"x{i}*x{(i + 1) % n}" for i in range(n)]
        terms = "+".join("(" + "+".join(t[k:k + 50]) + ")" for k in range(0, n, 50))
    else:
        terms = " + ".join(f"x{i} * x{(i + 1) % n} / (1 + x{(i + 2) % n} ** 2)" for i in range(n))
    lines = ["[budget]", f'title = "{n}-input benchmark model (invented)"', "", "[model]",
             f'Y = "{terms} + sqrt(x0) * exp(x1 / 10)"', "", "[monte_carlo]", "enabled = false"]
    for i in range(n):
        lines += ["", f"[inputs.x{i}]", f"value = {1.0 + 0.01 * i}",
                  f"standard_uncertainty = {0.001 * (1 + i % 7)}", f"dof = {5 + i % 20}"]
    return "\n".join(lines) + "\n"


def bench_lpu(n: int = 100, repeats: int = 5) -> tuple[float, float]:
    from budget import evaluate, parse_spec
    from budget.engine import resolve_inputs
    from budget.model import build_model
    from budget.propagate.lpu import propagate_linear
    name = f"bench{n}.toml"
    spec = parse_spec(lpu_spec(n), file=name, folder=HERE)
    res = resolve_inputs(spec)
    model = build_model(spec.outputs, quantities={q.name for q in res.quantities},
                        constants=spec.constants)
    t_lpu = min(cpu_timed(propagate_linear, model, res.quantities, res.corr)[:2]
                for _ in range(repeats))
    t_all = min(cpu_timed(evaluate, parse_spec(lpu_spec(n), file=name, folder=HERE))[:2]
                for _ in range(repeats))
    return t_lpu, t_all


# --------------------------------------------------------------------------- adaptive
def bench_adaptive() -> tuple[int, float, float]:
    from budget.propagate.mcm import McmSettings, monte_carlo
    model, qs = engine_setup()
    corr = np.eye(len(qs))
    _, t_ad, res = cpu_timed(monte_carlo, model, qs, corr,
                             McmSettings(trials=None, seed=5, significant_digits=3))
    n = res["Y"].trials
    _, t_fix, _ = cpu_timed(monte_carlo, model, qs, corr, McmSettings(trials=n, seed=5))
    return n, t_ad, t_fix


# --------------------------------------------------------------------------- main
def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="10^6 trials only, fewer repeats")
    ap.add_argument("--part", choices=("all", "mc", "memory", "lpu", "adaptive"), default="all",
                    help="run one part only (default: all)")
    ap.add_argument("--memory-child", nargs=2, metavar=("WHAT", "TRIALS"), help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.memory_child:
        memory_child(args.memory_child[0], int(args.memory_child[1]))
        return 0

    from budget.propagate.mcm import CHUNK
    print(f"numpy {np.__version__}, Python {sys.version.split()[0]}, chunk {CHUNK:,} trials")
    rows = []
    part = args.part
    ok = True
    if part in ("all", "memory") and not args.quick:      # first, while this process is small
        base = peak_rss("imports", 0)
        eng = peak_rss("engine", 10 ** 7)
        bas = peak_rss("baseline", 10 ** 7)
        rows.append(("Peak RSS, Monte Carlo 1e+07 trials", f"{eng:.0f} MB",
                     f"{bas:.0f} MB", f"imports alone {base:.0f} MB", "<= 500 MB",
                     "met" if eng <= 500 else "MISSED"))
        print(rows[-1])
    sizes = [(10 ** 6, 2 if args.quick else 5)] + ([] if args.quick else [(10 ** 7, 3)])
    for trials, repeats in (sizes if part in ("all", "mc") else []):
        t_e, t_b, c_e, c_b = [], [], [], []
        for _ in range(repeats):                 # alternate, so drifts hit both alike
            we, ce, re = cpu_timed(engine, trials, 1)
            wb, cb, rb = cpu_timed(baseline, trials, 1, CHUNK)
            t_e.append(we)
            t_b.append(wb)
            c_e.append(ce)
            c_b.append(cb)
            if re != rb:
                ok = False
                print(f"MISMATCH at {trials}: engine {re} vs baseline {rb}")
        ratio = min(c_e) / min(c_b)
        rows.append((f"Monte Carlo, 20 inputs, {trials:.0e} trials",
                     f"{min(c_e):.2f} s CPU ({min(t_e):.2f} s wall)",
                     f"{min(c_b):.2f} s CPU ({min(t_b):.2f} s wall)",
                     f"{ratio:.2f}x (wall {min(t_e) / min(t_b):.2f}x)", "<= 1.5x",
                     "met" if ratio <= 1.5 else "MISSED"))
        print(rows[-1])
    if part in ("all", "lpu"):
        (w_lpu, c_lpu), (w_all, c_all) = bench_lpu()
        rows.append(("propagate_linear, 100 inputs",
                     f"{w_lpu * 1e3:.1f} ms wall ({c_lpu * 1e3:.1f} ms CPU)", "", "", "< 0.2 s",
                     "met" if w_lpu < 0.2 else "MISSED"))
        rows.append(("evaluate(spec), 100 inputs, no MC",
                     f"{w_all * 1e3:.0f} ms wall ({c_all * 1e3:.0f} ms CPU)", "", "",
                     "(information)", ""))
        print(rows[-2])
        print(rows[-1])
        # issue 14: derivative text is written only on demand, so evaluate is O(n · model size)
        (w_lpu, c_lpu), (w_all, c_all) = bench_lpu(1000, repeats=3)
        rows.append(("propagate_linear, 1000 inputs",
                     f"{w_lpu * 1e3:.0f} ms wall ({c_lpu * 1e3:.0f} ms CPU)", "", "",
                     "(information)", ""))
        rows.append(("evaluate(spec), 1000 inputs, no MC",
                     f"{w_all * 1e3:.0f} ms wall ({c_all * 1e3:.0f} ms CPU)", "", "", "< 1 s",
                     "met" if w_all < 1.0 else "MISSED"))
        print(rows[-2])
        print(rows[-1])
    if part in ("all", "adaptive") and not args.quick:
        n, t_ad, t_fix = bench_adaptive()
        rows.append((f"adaptive (ndig = 3) vs fixed, {n:,} trials", f"{t_ad:.2f} s CPU",
                     f"{t_fix:.2f} s CPU (fixed)", f"{t_ad / t_fix:.2f}x", "(information)", ""))
        print(rows[-1])

    print()
    print("| measurement | engine | baseline | ratio / note | target | |")
    print("|---|---|---|---|---|---|")
    for r in rows:
        print("| " + " | ".join(r) + " |")
    if not ok:
        print("\nThe engine and the baseline did not draw the same variates: ratios are void.")
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
