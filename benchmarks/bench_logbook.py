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

Three ways of adding, alternated in every round, a fresh book for each add:

* one process (``workers=1``: what the default picks on a busy machine);
* the same with the former JSON reader and compressor (the standard library's ``json`` and
  ``zlib`` at level 1) in place of msgspec and ISA-L — the same work otherwise;
* two worker processes (what the default picks on an idle 2-core machine);
* the command, ``budget logbook add --book B FILE…`` in a new process (its start-up, imports
  and the unit registry included; the default number of workers for the load at the time).

Then, per record, the steps of an add timed alone on 1 000 of the files (min of 5 passes), the
former reader and compressor beside the present ones (each pair checked to give the same
parsed data, the same bytes back). Wall-clock and CPU time (this process and its finished
worker processes); the load average before and after.

A second, smaller run adds the 10-hour resistor-chain record of ``worked_examples/runs``
(about 150 kB, most of it module diagnostics) 1 000 times, to show how size and time grow
with the record.

    .venv/bin/python benchmarks/bench_logbook.py [N [REPEATS]]
"""

from __future__ import annotations

import hashlib
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
import zlib
from contextlib import ExitStack
from datetime import date, timedelta
from pathlib import Path
from unittest import mock

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "worked_examples" / "season"))

from make_records import make_records  # noqa: E402

from budget import record as record_mod  # noqa: E402
from budget.logbook import Logbook, add_files, compute_trend, extract, rows  # noqa: E402
from budget.logbook.ops import add_prepared, prepare_files  # noqa: E402
from budget.record import _check_record, budget_from_data, read_record_bytes  # noqa: E402


def former():
    """The former reader and compressor: standard-library json and zlib (level 1)."""
    stack = ExitStack()
    stack.enter_context(mock.patch.object(record_mod, "_FAST_PARSE", False))
    stack.enter_context(mock.patch.object(rows, "_deflate", rows.reference_deflate))
    return stack


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


def mmm(xs: list[float], unit: str = "s", scale: float = 1.0, digits: int = 2) -> str:
    return (f"{min(xs) * scale:.{digits}f} / {statistics.median(xs) * scale:.{digits}f} / "
            f"{max(xs) * scale:.{digits}f} {unit}")


def row(label: str, times: tuple[list[float], list[float]], target: str) -> str:
    wall, cpu = times
    return f"| {label} | {mmm(wall)} | {mmm(cpu)} | {target} |"


def load() -> str:
    return " ".join(f"{x:.2f}" for x in os.getloadavg())


def command(book: Path, files: list[Path]) -> None:
    subprocess.run([sys.executable, "-m", "budget", "logbook", "add", "--book", str(book),
                    *map(str, files)], check=True, capture_output=True, cwd=ROOT)


ADDS = {
    "add, one process": (1, ExitStack),
    "add, one process, former json + zlib": (1, former),
    "add, 2 worker processes (CPU summed over all processes)": (2, ExitStack),
    "budget logbook add, the command (CPU of its process)": (None, ExitStack),
}


def bench(files: list[Path], tmp: Path, label: str, repeats: int) -> list[str]:
    books = iter(tmp / f"{label}-{i}.sqlite" for i in range(len(ADDS) * repeats))
    times = {name: ([], []) for name in ADDS}
    sizes = {}
    for _ in range(repeats):
        for name, (workers, ctx) in ADDS.items():
            book = next(books)
            with ctx():
                w, c = timed(lambda: add_files(book, files, workers=workers) if workers
                             else command(book, files), 1)
            times[name][0].extend(w)
            times[name][1].extend(c)
            sizes[name] = book.stat().st_size / 1e6
            if book.name != f"{label}-0.sqlite":
                book.unlink()
    book = tmp / f"{label}-0.sqlite"
    with Logbook.open(book) as lb:
        listing = timed(lb.entries, 5)
        trend = timed(lambda: compute_trend(lb.series("delta_I")), 5)
    avg = sum(p.stat().st_size for p in files) / len(files) / 1e3
    n = len(files)
    out = [f"{label}: {n} records of {avg:.1f} kB on average; book "
           + ", ".join(f"{s:.1f} MB ({k.split(' (')[0]})" for k, s in sizes.items()),
           "| what | wall min / median / max | CPU min / median / max | target |",
           "|---|---|---|---|"]
    for name in ADDS:
        out.append(row(f"{name}, {n} records", times[name],
                       "< 10 s" if n == 10_000 and name == "add, one process" else "—"))
    return out + [row(f"list {n} records", listing, "< 1 s"),
                  row(f"trend over {n} records", trend, "< 1 s"), ""]


def _min_per_record(fn, items, passes: int = 5) -> float:
    best = float("inf")
    for _ in range(passes):
        t0 = time.process_time()
        for x in items:
            fn(x)
        best = min(best, time.process_time() - t0)
    return best / len(items)


def steps(files: list[Path], tmp: Path) -> list[str]:
    """Each step of an add on its own, per record (CPU, min of 5 passes over the files)."""
    raws = [read_record_bytes(f) for f in files]
    datas = [json.loads(r) for r in raws]
    with mock.patch.object(record_mod, "_FAST_PARSE", True):
        assert [record_mod.parse_json(r, "x") for r in raws] == datas
    packed = [rows._deflate(r) for r in raws]
    former_packed = [rows.reference_deflate(r) for r in raws]
    assert [zlib.decompress(b) for b in packed] == raws
    ratio = sum(map(len, packed)) / sum(map(len, raws))
    former_ratio = sum(map(len, former_packed)) / sum(map(len, raws))
    prepared = prepare_files(files, workers=1)
    books = iter(tmp / f"steps-{i}.sqlite" for i in range(100))

    def insert(_):
        add_prepared(next(books), prepared)
    t = {
        "read the file": _min_per_record(read_record_bytes, files),
        "SHA-256 of the bytes": _min_per_record(lambda r: hashlib.sha256(r).hexdigest(), raws),
        "parse, msgspec (fallback: json)": _min_per_record(
            lambda r: record_mod.parse_json(r, "x"), raws),
        "parse, json (former)": _min_per_record(
            lambda r: json.loads(r.decode("utf-8-sig")), raws),
        "JSON Schema check": _min_per_record(lambda d: _check_record(d, "x"), datas),
        "Budget.from_dict": _min_per_record(lambda d: budget_from_data(d, "x"), datas),
        "canonical JSON + SHA-256": _min_per_record(lambda d: hashlib.sha256(
            extract.canonical_json({**d, "run": {k: v for k, v in d["run"].items()
                                                 if k != "modules"}})).hexdigest(), datas),
        "whole prepare (all of the above but compressing)": _min_per_record(
            lambda f: extract.prepare(read_record_bytes(f), str(f)), files),
        f"compress, ISA-L level 1 (ratio {ratio:.3f})": _min_per_record(rows._deflate, raws),
        f"compress, zlib level 1, former (ratio {former_ratio:.3f})": _min_per_record(
            rows.reference_deflate, raws),
        "SQLite insert and COMMIT (compressed beforehand)": 0.0,
    }
    for r, b in zip(prepared, packed):
        object.__setattr__(r, "body", b)
    t["SQLite insert and COMMIT (compressed beforehand)"] = min(
        timed(lambda: insert(None), 1)[1][0] for _ in range(3)) / len(files)
    return [f"per record, {len(files)} season records, CPU, min of 5 passes "
            "(insert: min of 3 adds)", "| step | ms per record |", "|---|---|"] + [
        f"| {k} | {v * 1e3:.3f} |" for k, v in t.items()] + [""]


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 10_000
    repeats = int(sys.argv[2]) if len(sys.argv) > 2 else 3
    lines = [f"load average before: {load()}"]
    with tempfile.TemporaryDirectory() as t:
        tmp = Path(t)
        season = make_records(tmp / "season")
        small = copies(season, tmp / "small", n)
        lines += steps(small[:1000], tmp)
        lines += bench(small, tmp, "season records", repeats)
        big = tmp / "run_a.json"
        subprocess.run([sys.executable, "-m", "budget", "run",
                        str(ROOT / "worked_examples" / "runs" / "run_a.toml"), "--json",
                        str(big), "--no-monte-carlo"], check=True, capture_output=True)
        lines += bench(copies([big], tmp / "big", n // 10), tmp, "10-hour records", 1)
    lines.append(f"load average after: {load()}")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
