"""Run every benchmark script (benchmarks/bench_*.py) in turn, by hand, never in CI.

Usage::

    .venv/bin/python benchmarks/run_all.py            # every bench_*.py, in name order
    .venv/bin/python benchmarks/run_all.py engine     # only those whose name contains "engine"

Each script runs in its own process (so one script's memory and imports do not disturb the
next) and prints its own table; copy the numbers into benchmarks/README.md, each into its own
section. The exit status is 1 when any script failed.
"""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent


def main(argv: list[str]) -> int:
    scripts = sorted(HERE.glob("bench_*.py"))
    if argv:
        scripts = [s for s in scripts if any(word in s.stem for word in argv)]
    if not scripts:
        print("no benchmark scripts matched", file=sys.stderr)
        return 1
    failed = []
    for script in scripts:
        print(f"=== {script.name}", flush=True)
        t0 = time.perf_counter()
        code = subprocess.call([sys.executable, str(script)], cwd=HERE.parent)
        print(f"=== {script.name}: exit {code}, {time.perf_counter() - t0:.0f} s\n", flush=True)
        if code != 0:
            failed.append(script.name)
    if failed:
        print("failed: " + ", ".join(failed), file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
