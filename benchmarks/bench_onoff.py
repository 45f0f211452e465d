"""Reading a 10⁷-row on/off record (issue 14, scale): ``read_onoff`` against the general
reading it falls back to (by hand, never in CI).

Target: 10⁷ rows in < 1.5 s. The record is invented (``bench_cycles.write_record``: 10 Hz
readings, 60 s segments, ten significant digits, about 270 MB). ``read_onoff`` parses the two
number columns straight to float64 without ``skipinitialspace`` when no field can begin with a
space (checked first); the baseline is the same function with that fast path switched off,
i.e. the reading as it was (pandas infers each column, then the same checks). Both are run
alternately in one process, 5 pairs, wall-clock and process CPU time; the script checks that
both give bit-identical arrays.

    .venv/bin/python benchmarks/bench_onoff.py [ROWS]
"""

from __future__ import annotations

import statistics
import sys
import tempfile
import time
from pathlib import Path
from unittest import mock

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_cycles import write_record  # noqa: E402

from budget.inputs import onoff_table  # noqa: E402


def timed(fn):
    t0, c0 = time.perf_counter(), time.process_time()
    out = fn()
    return out, time.perf_counter() - t0, time.process_time() - c0


def stats(xs: list[float]) -> str:
    return f"{min(xs):.2f} / {statistics.median(xs):.2f} / {max(xs):.2f} s"


def main() -> None:
    rows = int(sys.argv[1]) if len(sys.argv) > 1 else 10 ** 7
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "onoff.csv"
        write_record(path, rows, 0.1, 60.0, seed=1)
        size = path.stat().st_size / 1e6
        fast, base = ([], []), ([], [])
        for _ in range(5):
            a, w, c = timed(lambda: onoff_table.read_onoff(path))
            fast[0].append(w)
            fast[1].append(c)
            with mock.patch.object(onoff_table, "_no_initial_space", lambda raw: False):
                b, w, c = timed(lambda: onoff_table.read_onoff(path))
            base[0].append(w)
            base[1].append(c)
            assert all(np.array_equal(getattr(a, k), getattr(b, k))
                       for k in ("time", "reading", "on")), "readers disagree"
    ratio = [f / b for f, b in zip(fast[1], base[1])]
    print(f"{rows} rows, {size:.0f} MB; arrays bit-identical")
    print("| reader | wall min / median / max | CPU min / median / max |")
    print("|---|---|---|")
    print(f"| read_onoff | {stats(fast[0])} | {stats(fast[1])} |")
    print(f"| general reading (before) | {stats(base[0])} | {stats(base[1])} |")
    print(f"CPU ratio per pair min / median / max: {min(ratio):.2f} / "
          f"{statistics.median(ratio):.2f} / {max(ratio):.2f}")


if __name__ == "__main__":
    main()
