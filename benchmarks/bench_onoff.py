"""Reading a 10⁷-row on/off record (issue 14, scale): ``read_onoff`` against the readings it
replaces (by hand, never in CI).

Target: 10⁷ rows in < 1.5 s. The record is invented (``bench_cycles.write_record``: 10 Hz
readings, 60 s segments, ten significant digits, about 270 MB). Three readers, each the whole
of ``read_onoff`` (reading the bytes, header, parsing, checks), differing only in the path:

* ``read_onoff``: the body cut at newlines into one piece per processor, each piece read with
  ``os.pread`` and parsed to float64 by pandas' C parser in its own thread, the arrays joined;
* one piece, one thread: the whole bytes read, then the same parse in one thread (the reader
  before the cut into pieces, with its ``low_memory`` parse);
* general: the fast path switched off (pandas infers each column with ``skipinitialspace``,
  then the same checks) — the reference the others must equal bit for bit.

Run in one process, the order rotated every round, ``REPEATS`` rounds (default 7), wall-clock
and process CPU time; the script checks that all three give bit-identical arrays and prints
the load average before and after. For ``read_onoff`` it also gives the CPU time of the
longest piece's thread and the CPU time outside the pieces (joining, checks): their sum is
what the wall time would be with a free processor for each piece, which a machine shared
with other jobs does not show.

    .venv/bin/python benchmarks/bench_onoff.py [ROWS [REPEATS]]
"""

from __future__ import annotations

import os
import statistics
import sys
import tempfile
import time
from pathlib import Path
from unittest import mock

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_cycles import write_record  # noqa: E402

from budget.inputs import onoff_parse, onoff_table  # noqa: E402

PIECE_CPU: list[float] = []          # thread CPU time of each piece of the current reading
_read_piece = onoff_parse.read_piece


def _timed_piece(*args):
    c0 = time.thread_time()
    try:
        return _read_piece(*args)
    finally:
        PIECE_CPU.append(time.thread_time() - c0)


READERS = {
    "read_onoff (pieces in threads)": lambda: mock.patch.object(onoff_parse, "read_piece",
                                                                _timed_piece),
    "one piece, one thread": lambda: mock.patch.object(onoff_parse, "threads",
                                                              lambda: 1),
    "general reading": lambda: mock.patch.object(onoff_table, "_FAST", False),
}


def timed(fn):
    t0, c0 = time.perf_counter(), time.process_time()
    out = fn()
    return out, time.perf_counter() - t0, time.process_time() - c0


def stats(xs: list[float]) -> str:
    return f"{min(xs):.2f} / {statistics.median(xs):.2f} / {max(xs):.2f} s"


def load() -> str:
    return " ".join(f"{x:.2f}" for x in os.getloadavg())


def main() -> None:
    rows = int(sys.argv[1]) if len(sys.argv) > 1 else 10 ** 7
    repeats = int(sys.argv[2]) if len(sys.argv) > 2 else 7
    names = list(READERS)
    wall = {k: [] for k in names}
    cpu = {k: [] for k in names}
    longest, serial = [], []
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "onoff.csv"
        write_record(path, rows, 0.1, 60.0, seed=1)
        size = path.stat().st_size / 1e6
        print(f"load average before (1, 5, 15 min): {load()}; "
              f"{onoff_parse.threads()} processors", flush=True)
        for r in range(repeats):
            got = {}
            for k in names[r % 3:] + names[:r % 3]:           # rotated order
                PIECE_CPU.clear()
                with READERS[k]():
                    got[k], w, c = timed(lambda: onoff_table.read_onoff(path))
                wall[k].append(w)
                cpu[k].append(c)
                if k == names[0]:
                    longest.append(max(PIECE_CPU))
                    serial.append(c - sum(PIECE_CPU))
            ref = got["general reading"]
            assert all(getattr(t, a).tobytes() == getattr(ref, a).tobytes()
                       and getattr(t, a).dtype == getattr(ref, a).dtype
                       for t in got.values() for a in ("time", "reading", "on")), \
                "readers disagree"
    print(f"load average after: {load()}")
    print(f"{rows} rows, {size:.0f} MB, {repeats} rounds; arrays bit-identical")
    print("| reader | wall min / median / max | CPU min / median / max |")
    print("|---|---|---|")
    for k in names:
        print(f"| {k} | {stats(wall[k])} | {stats(cpu[k])} |")
    print(f"read_onoff: CPU of the longest piece's thread {stats(longest)}; CPU outside the "
          f"pieces {stats(serial)}; their sum per round (the wall time if each piece had a "
          f"processor of its own and never waited for the GIL) "
          f"{stats([a + b for a, b in zip(longest, serial)])}")
    for k in names[1:]:
        ratio = [a / b for a, b in zip(wall[names[0]], wall[k])]
        print(f"wall ratio read_onoff / {k}, per round min / median / max: "
              f"{min(ratio):.2f} / {statistics.median(ratio):.2f} / {max(ratio):.2f}")


if __name__ == "__main__":
    main()
