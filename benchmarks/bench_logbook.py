"""Logbook at scale: 10 000 records added, listed and trended; the book's size (by hand).

Targets (issue 16): 10 000 records added in < 10 s; ``list`` and ``trend`` over 10 000 records
in < 1 s; the book of 10 000 records < 200 MB.

The records are the invented season's records (``worked_examples/season``, evaluated once):
runs 19–30 (between the two recalibrations) for the first half and 31–48 (after the resistor's)
for the second, copied with a changed title, measurement date and on/off-record description
(each distinct, its Type A term its own, dates spread over about 27 years, one recalibration
in the middle), kept as files; the add reads, checks and digests every file
(``budget.logbook.add_files``, what ``budget logbook add`` does) and writes them in one
transaction. List = ``Logbook.entries()``; trend = ``Logbook.series`` + ``compute_trend``.
Each timing is repeated (a fresh book for each add) and reported as min / median / max; the add
is timed in one process (``workers=1``) and with two worker processes, alternated (the
default picks one per idle CPU).

A second, smaller run adds the 10-hour resistor-chain record of ``worked_examples/runs``
(about 100 kB, most of it module diagnostics) 1 000 times, to show how size and time grow
with the record.

    .venv/bin/python benchmarks/bench_logbook.py [N]
"""

from __future__ import annotations

import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from datetime import date, timedelta
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "worked_examples" / "season"))

from make_records import make_records  # noqa: E402

from budget.logbook import Logbook, add_files, compute_trend  # noqa: E402


def copies(src: list[Path], out: Path, n: int) -> list[Path]:
    """n distinct records cycling through ``src`` in order (so the calibrations change where
    they change in ``src``: with the season's runs 19–30, then 31–48, once in the middle)."""
    out.mkdir(parents=True, exist_ok=True)
    base = [json.loads(p.read_text(encoding="utf-8")) for p in src]
    first, second = (base[18:30], base[30:]) if len(base) == 48 else (base, base)
    paths = []
    for i in range(n):
        half = first if i < n // 2 else second
        d = half[i % len(half)]
        day = date(2000, 1, 1) + timedelta(days=i)
        d["run"]["title"] = f"copy {i} of the season"
        for q in d["inputs"]:
            if q["name"] == "dV":   # each run has its own on/off record: never a shared term
                q["source"]["description"] = f"on/off record of copy {i}"
        d["run"]["report"]["measurement_date"] = f"{day.isoformat()} 18:00 to 23:00"
        p = out / f"r{i:05d}.json"
        p.write_text(json.dumps(d, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")
        paths.append(p)
    return paths


def _cpu() -> float:
    """CPU seconds of this process and of its finished child processes (the add's workers)."""
    t = os.times()
    return t.user + t.system + t.children_user + t.children_system


def timed(fn, repeats: int) -> tuple[list[float], list[float]]:
    """Wall-clock and CPU times (this process and its worker processes) of ``repeats`` calls
    (the machine is shared: CPU time is what the work costs, wall time what a user waits)."""
    wall, cpu = [], []
    for _ in range(repeats):
        t0, c0 = time.perf_counter(), _cpu()
        fn()
        wall.append(time.perf_counter() - t0)
        cpu.append(_cpu() - c0)
    return wall, cpu


def row(label: str, times: tuple[list[float], list[float]], target: str) -> str:
    wall, cpu = times
    return (f"| {label} | {min(wall):.2f} / {statistics.median(wall):.2f} / {max(wall):.2f} s "
            f"| {min(cpu):.2f} / {statistics.median(cpu):.2f} / {max(cpu):.2f} s | {target} |")


def bench(files: list[Path], tmp: Path, label: str, repeats: int) -> list[str]:
    # one process (workers=1, the default on a busy machine) and two worker processes
    # (the default on an idle 2-core machine) alternated, a fresh book for each add
    books = iter(tmp / f"{label}-{i}.sqlite" for i in range(2 * repeats))
    serial, parallel = ([], []), ([], [])
    for _ in range(repeats):
        for dest, workers in ((serial, 1), (parallel, 2)):
            w, c = timed(lambda workers=workers: add_files(next(books), files, workers=workers), 1)
            dest[0].extend(w)
            dest[1].extend(c)
    book = tmp / f"{label}-0.sqlite"
    with Logbook.open(book) as lb:
        listing = timed(lb.entries, 5)
        trend = timed(lambda: compute_trend(lb.series("delta_I")), 5)
    size = book.stat().st_size / 1e6
    avg = sum(p.stat().st_size for p in files) / len(files) / 1e3
    n = len(files)
    return [f"{label}: {n} records of {avg:.1f} kB on average; book {size:.1f} MB",
            "| what | wall min / median / max | CPU min / median / max | target |",
            "|---|---|---|---|",
            row(f"add {n} records, one process", serial, "< 10 s" if n == 10_000 else "—"),
            row(f"add {n} records, 2 worker processes (CPU summed over all processes)",
                parallel, "—"),
            row(f"list {n} records", listing, "< 1 s"),
            row(f"trend over {n} records", trend, "< 1 s"), ""]


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 10_000
    with tempfile.TemporaryDirectory() as t:
        tmp = Path(t)
        season = make_records(tmp / "season")
        lines = bench(copies(season, tmp / "small", n), tmp, "season records", 3)
        big = tmp / "run_a.json"
        subprocess.run([sys.executable, "-m", "budget", "run",
                        str(ROOT / "worked_examples" / "runs" / "run_a.toml"), "--json",
                        str(big), "--no-monte-carlo"], check=True, capture_output=True)
        lines += bench(copies([big], tmp / "big", n // 10), tmp, "10-hour records", 1)
    print("\n".join(lines))


if __name__ == "__main__":
    main()
