"""``add_files`` with worker processes (issue 16, scale) stores exactly what the serial path
stores and refuses exactly as it does (project convention: the parallel path is an
implementation detail, so the serial path is the reference)."""

from __future__ import annotations

import sqlite3

import pytest
from logbook_helpers import season_records, variant

from budget.errors import BudgetError
from budget.logbook import Logbook, add_files
from budget.logbook.ops import prepare_files


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    base = season_records(tmp_path_factory.mktemp("season"), first=3)
    out = tmp_path_factory.mktemp("variants")
    return [variant(base[i % 3], out / f"v{i:03d}.json", i) for i in range(40)]


def _rows(book):
    con = sqlite3.connect(book)
    try:
        return {t: con.execute(f"SELECT * FROM {t} ORDER BY 1, 2").fetchall()
                for t in ("measurands", "calibrations", "terms")} | {
            "records": con.execute("SELECT id, sha256, canonical_sha256, body, size, file_name, "
                                   "title, chain, date_start, date_end FROM records "
                                   "ORDER BY id").fetchall()}
    finally:
        con.close()


def test_parallel_add_stores_what_the_serial_add_stores(files, tmp_path):
    add_files(tmp_path / "serial.sqlite", files, workers=1)
    add_files(tmp_path / "parallel.sqlite", files, workers=2)
    assert _rows(tmp_path / "serial.sqlite") == _rows(tmp_path / "parallel.sqlite")
    with Logbook.open(tmp_path / "parallel.sqlite") as lb:
        assert lb.count() == len(files)
    assert all(r.body for r in prepare_files(files[:4], workers=2))


def test_parallel_add_refuses_the_first_bad_file_and_adds_nothing(files, tmp_path):
    bad = tmp_path / "not_a_record.json"
    bad.write_text('{"hello": 1}\n')
    listed = files[:10] + [bad] + files[10:]
    with pytest.raises(BudgetError) as serial:
        add_files(tmp_path / "a.sqlite", listed, workers=1)
    with pytest.raises(BudgetError) as parallel:
        add_files(tmp_path / "b.sqlite", listed, workers=2)
    assert parallel.value.one_line() == serial.value.one_line()
    assert str(bad) in parallel.value.one_line()
    assert not (tmp_path / "b.sqlite").exists()


def test_killed_parallel_add_leaves_the_book_and_no_worker(files, tmp_path):
    # a SIGKILL while the workers read (issue 16: "a killed write leaves the book as before");
    # the workers notice that their parent is gone and leave (none may linger)
    import os
    import signal
    import subprocess
    import sys
    import time
    book = tmp_path / "book.sqlite"
    add_files(book, files[:3], workers=1)
    # copies of the 40 variants: the add is killed while the workers read, before the
    # duplicates would be refused
    raws = [f.read_bytes() for f in files]
    many = []
    for i in range(3000):
        many.append(tmp_path / f"m{i:04d}.json")
        many[-1].write_bytes(raws[i % len(raws)])
    proc = subprocess.Popen([sys.executable, "-c", (
        "import sys\nfrom budget.logbook import add_files\n"
        "add_files(sys.argv[1], sys.argv[2:], workers=2)"), str(book), *map(str, many)])
    workers: list[str] = []
    deadline = time.monotonic() + 30
    while len(workers) < 2 and time.monotonic() < deadline and proc.poll() is None:
        time.sleep(0.05)
        workers = subprocess.run(["pgrep", "-P", str(proc.pid)], capture_output=True,
                                 text=True).stdout.split()
    assert len(workers) == 2, "the add should still be reading when killed"
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    deadline = time.monotonic() + 10

    def alive():
        out = []
        for w in workers:
            try:
                with open(f"/proc/{w}/stat") as f:
                    if f.read().split(")")[-1].split()[0] != "Z":
                        out.append(w)
            except FileNotFoundError:
                pass
        return out
    while alive() and time.monotonic() < deadline:
        time.sleep(0.1)
    assert alive() == []
    with Logbook.open(book) as lb:
        assert lb.count() == 3
