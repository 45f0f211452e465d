"""The whole demo (issue 14): ``worked_examples/run_demo.py``, what ``make demo`` runs after
install, against the same demo of another tree (by hand, never in CI).

Target: < 30 s wall (median of 3) on this machine. Each run is a fresh interpreter running the
tree's ``run_demo.py`` with the tree as working folder (so it uses that tree's package), runs
of this tree and of the baseline alternated (who goes first swapped each round, N runs of
each); wall-clock time and the CPU time of the run and
all its child processes. The baseline is the tree given as BASELINE (e.g. an export of the
commit before a change: ``git archive REV | tar -x -C /tmp/base``).

    .venv/bin/python benchmarks/bench_demo.py [BASELINE] [--runs N]
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def one(tree: Path) -> tuple[float, float]:
    before = os.times()
    t0 = time.perf_counter()
    subprocess.run([sys.executable, str(tree / "worked_examples" / "run_demo.py")], cwd=tree,
                   check=True, stdout=subprocess.DEVNULL, env={**os.environ, "PYTHONPATH": ""})
    wall = time.perf_counter() - t0
    after = os.times()
    return wall, (after.children_user + after.children_system
                  - before.children_user - before.children_system)


def line(label: str, runs: list[tuple[float, float]]) -> str:
    w, c = [r[0] for r in runs], [r[1] for r in runs]
    return (f"| {label} | {len(runs)} | {min(w):.1f} / {statistics.median(w):.1f} / "
            f"{max(w):.1f} s | {min(c):.1f} / {statistics.median(c):.1f} / {max(c):.1f} s |")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("baseline", nargs="?", type=Path)
    ap.add_argument("--runs", type=int, default=3)
    a = ap.parse_args()
    ours, base = [], []
    loads = [os.getloadavg()[0]]
    for i in range(a.runs):                      # alternated, who goes first swapped each round
        for who in ((0, 1) if i % 2 == 0 else (1, 0)):
            if who == 0:
                ours.append(one(ROOT))
            elif a.baseline is not None:
                base.append(one(a.baseline))
            loads.append(os.getloadavg()[0])
    print("| demo | runs | wall min / median / max | CPU min / median / max |")
    print("|---|---|---|---|")
    print(line("this tree", ours))
    if base:
        print(line(f"baseline {a.baseline}", base))
    print(f"1-minute load average before and after each run: min {min(loads):.1f}, median "
          f"{statistics.median(loads):.1f}, max {max(loads):.1f}")


if __name__ == "__main__":
    main()
