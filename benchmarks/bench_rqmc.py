"""Randomized quasi-Monte Carlo against pseudo-random Monte Carlo (issue 14): time and trials
to the 95 % interval at two significant digits, checked against a 10⁸-trial reference.

Run by hand (never in CI)::

    .venv/bin/python benchmarks/bench_rqmc.py              # full table (about 15 minutes)
    .venv/bin/python benchmarks/bench_rqmc.py --quick      # 10⁷-trial reference, 3 seeds

For every worked example whose spec runs the Monte Carlo method, and in one run on one machine:

1. a reference: one pseudo-random run of 10⁸ trials (``sampling = "random"``, fixed trials);
2. the adaptive procedure (JCGM 101 §7.9, two significant digits, stop at δ/5) with
   ``sampling = "random"`` and with ``sampling = "sobol"``, alternated seed by seed (paired),
   over the same seeds; each run is the whole ``budget.evaluate`` of the spec (inputs, linear
   propagation, Monte Carlo), timed with ``time.perf_counter``.

Printed per example: trials at the stop and wall time (min/median/max over the seeds) for both,
the ratio of the median trial counts, and for both the largest |interval end − reference| in
units of δ (the numerical tolerance of u(y), JCGM 101 §7.9.2) with the fraction of seeds within
δ/5. The adaptive stop leaves each interval end a standard error of about δ/10 (2·s ≤ δ/5), so
about one run in ten is expected to have an end beyond δ/5 by chance, for either sampling; the
10⁸-trial reference has a standard error of δ/40 to δ/70 (√(M_stop/10⁸) of δ/10).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from dataclasses import replace
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

EXAMPLES = ("typed_in_budget", "resistor_chain", "amplifier_chain", "pump_characterisation")


def run(spec, trials, seed, sampling):
    from budget.engine import evaluate
    t0 = time.perf_counter()
    b = evaluate(replace(spec, sampling=sampling), trials=trials, seed=seed)
    return time.perf_counter() - t0, b


def mmm(xs, fmt):
    return "/".join(fmt(x) for x in (min(xs), statistics.median(xs), max(xs)))


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="10^7 reference, 3 seeds")
    ap.add_argument("--seeds", type=int, default=None, help="seeds per sampling (default 10)")
    ap.add_argument("--examples", nargs="*", default=list(EXAMPLES))
    args = ap.parse_args()
    from budget import load_spec
    from budget.propagate.validate import numerical_tolerance
    ref_trials = 10 ** 7 if args.quick else 10 ** 8
    seeds = range(1, 1 + (args.seeds or (3 if args.quick else 10)))
    rows = []
    for ex in args.examples:
        spec = load_spec(HERE.parent / "worked_examples" / ex / "spec.toml")
        t_ref, ref = run(spec, ref_trials, 10 ** 6 + 7, "random")
        outs = [o for o in spec.outputs if ref.mc(o) is not None]
        deltas = {}
        for o in outs:
            rm = ref.mc(o)
            # δ as the adaptive stop takes it: min(δ(u_MC), δ(u_c)) (budget/propagate/mcm.py)
            d_mc = numerical_tolerance(rm.standard_uncertainty, spec.significant_digits)
            d_c = numerical_tolerance(ref.measurand(o).standard_uncertainty,
                                      spec.significant_digits)
            deltas[o] = min(d for d in (d_mc, d_c) if d > 0)
            print(f"{ex}/{o}: reference {ref_trials:.0e} trials in {t_ref:.0f} s, "
                  f"[{rm.interval_low!r}, {rm.interval_high!r}], δ = {deltas[o]:.3g}",
                  flush=True)
        res = {"random": ([], [], []), "sobol": ([], [], [])}
        for seed in seeds:
            for sampling in ("random", "sobol"):            # paired: alternate per seed
                t, b = run(spec, None, seed, sampling)
                m = b.mc(outs[0])
                err = max(max(abs(b.mc(o).interval_low - ref.mc(o).interval_low),
                              abs(b.mc(o).interval_high - ref.mc(o).interval_high)) / deltas[o]
                          for o in outs)
                for lst, v in zip(res[sampling], (m.trials, t, err)):
                    lst.append(v)
                print(f"  {sampling:6s} seed {seed}: {m.trials:>9,} trials {t:6.2f} s "
                      f"|Δ| = {err:.3f} δ", flush=True)
        (nr, tr, er), (ns, ts, es) = res["random"], res["sobol"]
        rows.append((ex, mmm(nr, lambda x: f"{x / 1e6:.2f} M"), mmm(tr, lambda x: f"{x:.2f}"),
                     f"{max(er):.2f} δ ({sum(e <= 0.2 for e in er)}/{len(er)})",
                     mmm(ns, lambda x: f"{x / 1e6:.3f} M"), mmm(ts, lambda x: f"{x:.2f}"),
                     f"{max(es):.2f} δ ({sum(e <= 0.2 for e in es)}/{len(es)})",
                     f"{statistics.median(nr) / statistics.median(ns):.1f}×",
                     f"{statistics.median(tr) / statistics.median(ts):.1f}×"))
        print(rows[-1], flush=True)
    print()
    print(f"reference: {ref_trials:.0e} pseudo-random trials; {len(seeds)} seeds; "
          "trials and times min/median/max")
    print("| example | plain: trials | plain: time s | plain: max abs(end − ref) (within δ/5) "
          "| RQMC: trials | RQMC: time s | RQMC: max abs(end − ref) (within δ/5) "
          "| trials ratio (median) | time ratio (median) |")
    print("|---|---|---|---|---|---|---|---|---|")
    for r in rows:
        print("| " + " | ".join(r) + " |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
