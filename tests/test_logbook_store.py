"""The logbook store: records kept whole, digests, refusals that change nothing, kill safety.

The checks are against things outside the project: the SHA-256 digests against hashlib (the
standard library's FIPS 180-4 implementation), the book's integrity against SQLite's own
``PRAGMA integrity_check``, locking and rollback against SQLite's documented behaviour
(https://sqlite.org/lockingv3.html, https://sqlite.org/atomiccommit.html).
"""

from __future__ import annotations

import hashlib
import json
import os
import signal
import sqlite3
import stat
import subprocess
import sys
import time
import zlib
from pathlib import Path

import pytest
from logbook_helpers import file_digest, season_records, variant

from budget.errors import BudgetError, DataError
from budget.logbook import Logbook, add_files, export_book, resolve_book
from budget.logbook import schema as lb_schema
from budget.logbook.extract import parse_measurement_date


@pytest.fixture(scope="module")
def records(tmp_path_factory) -> list[Path]:
    return season_records(tmp_path_factory.mktemp("season"), first=6)


@pytest.fixture
def book(tmp_path, records) -> Path:
    p = tmp_path / "book.sqlite"
    add_files(p, records[:3])
    return p


def _state(p: Path) -> tuple[bytes, int]:
    """The book's bytes and record count: 'nothing changed' means both stay the same."""
    with Logbook.open(p) as lb:
        return p.read_bytes(), lb.count()


def _refused(p: Path, files, match: str, **kw) -> BudgetError:
    before = _state(p)
    with pytest.raises(BudgetError, match=match) as info:
        add_files(p, files, **kw)
    assert "\n" not in info.value.one_line()          # one line
    assert _state(p) == before                         # nothing changed
    return info.value


# --------------------------------------------------------------------------- keeping records
def test_records_kept_whole_and_exported_byte_identical(book, records, tmp_path):
    with Logbook.open(book) as lb:
        entries = lb.entries()
        assert [e.sha256 for e in entries] == [file_digest(r) for r in records[:3]]  # hashlib
        assert lb.record(entries[1].id).raw == records[1].read_bytes()
        out = tmp_path / "export"
        paths = export_book(lb, out)
    assert [p.read_bytes() for p in paths] == [r.read_bytes() for r in records[:3]]
    sums = (out / "SHA256SUMS").read_text().split("\n")
    assert sums[0].split() == [file_digest(paths[0]), paths[0].name]
    # the exported folder can be added to a new book: SHA256SUMS is checked and matches
    ids = add_files(tmp_path / "again.sqlite", paths)
    assert len(ids) == 3


def test_indexed_columns(book):
    with Logbook.open(book) as lb:
        e = lb.entries()[0]
        cal = {c["input"]: c for c in lb.record(e.id).calibrations}
    assert e.chain == "resistor-voltmeter" and e.pump == "HQ-P7-7B"
    assert (e.date_start, e.date_end) == ("2026-06-01T18:00", "2026-06-02T04:00")
    assert e.frequency_Hz == 600.0e6
    assert cal["R"]["kind"] == "typed in" and "HQML-R-2026-0310" in cal["R"]["identifier"]
    assert "dV" not in cal          # a Type A summary is not a calibration
    assert {m["name"] for m in e.measurands} == {"I", "delta_I"}


def test_amplifier_history_named_by_digest_and_date(tmp_path, records):
    p = tmp_path / "b.sqlite"
    add_files(p, [records[1]])
    with Logbook.open(p) as lb:
        cal = {c["input"]: c for c in lb.record(1).calibrations}
    hist = Path(__file__).parent.parent / "worked_examples/season/data/amplifier_history_v1.csv"
    assert cal["A_TR"]["identifier"] == file_digest(hist)
    assert cal["A_TR"]["calibration_date"] == "2026-04-07"    # last row of the v1 history


@pytest.mark.parametrize("text, start, end", [
    ("2026-11-17 20:00 to 23:02", "2026-11-17T20:00", "2026-11-17T23:02"),
    ("2026-06-01 18:00 to 2026-06-02 04:00", "2026-06-01T18:00", "2026-06-02T04:00"),
    ("on 2026-03-04", "2026-03-04", "2026-03-04"),
    ("no date given", None, None),
])
def test_measurement_date(text, start, end):
    assert parse_measurement_date(text) == (start, end)


def test_book_location(tmp_path):
    # --book wins, then BUDGET_LOGBOOK, then the XDG data folder (freedesktop.org base
    # directory specification)
    env = {"BUDGET_LOGBOOK": str(tmp_path / "env.sqlite"), "XDG_DATA_HOME": str(tmp_path)}
    assert resolve_book("x.sqlite", env) == (Path("x.sqlite"), False)
    assert resolve_book(None, env) == (tmp_path / "env.sqlite", False)
    del env["BUDGET_LOGBOOK"]
    assert resolve_book(None, env) == (tmp_path / "qcs-budget" / "logbook.sqlite", True)


# --------------------------------------------------------------------------- bad input
def test_duplicate_refused(book, records, tmp_path):
    _refused(book, [records[0]], "already in the book as #1")
    # the same record re-indented: another byte digest, the same canonical content
    d = json.loads(records[0].read_text())
    other = tmp_path / "reindented.json"
    other.write_text(json.dumps(d, indent=1), encoding="utf-8")
    _refused(book, [other], "same content")
    _refused(book, [records[3], records[3]], "the same record as")


def test_refused_first_add_leaves_no_book(tmp_path, records):
    p = tmp_path / "new.sqlite"
    with pytest.raises(DataError, match="the same record as"):
        add_files(p, [records[0], records[0]])
    assert not p.exists() and list(tmp_path.iterdir()) == []


def test_not_a_record(book, tmp_path, records):
    bad = tmp_path / "spec.toml"
    bad.write_text("[budget]\ntitle = 'x'\n", encoding="utf-8")
    e = _refused(book, [records[3], bad], "not valid JSON")
    assert e.file == str(bad) and e.line == 1
    lst = tmp_path / "list.json"
    lst.write_text("[1, 2]", encoding="utf-8")
    _refused(book, [lst], "must be a JSON object")


def test_another_schema_version(book, tmp_path, records):
    d = json.loads(records[3].read_text())
    d["schema"] = "qcs-budget/record-0"
    p = tmp_path / "old.json"
    p.write_text(json.dumps(d), encoding="utf-8")
    e = _refused(book, [p], "this version reads 'qcs-budget/record-2'")
    assert e.field == "schema"
    # a newer format than the code knows is refused the same way (its fields' meaning is
    # unknown); the older format it still reads is not "another schema version"
    d["schema"] = "qcs-budget/record-3"
    p.write_text(json.dumps(d), encoding="utf-8")
    assert _refused(book, [p], "and the older 'qcs-budget/record-1'").field == "schema"


def test_tampered_record_stated_digest(book, tmp_path, records):
    folder = tmp_path / "exported"
    folder.mkdir()
    p = folder / "r.json"
    p.write_bytes(records[3].read_bytes().replace(b'"HQ-P7-7B"', b'"HQ-P7-7C"'))
    (folder / "SHA256SUMS").write_text(f"{file_digest(records[3])}  r.json\n")
    e = _refused(book, [p], "tampered record")
    assert e.field == "sha256"


def test_stated_digests_of_a_folder_read_once_for_every_file(book, tmp_path, records):
    # one SHA256SUMS for several files (what export writes): each file is checked against
    # its own line; the tampered one is named, and nothing is added
    folder = tmp_path / "exported"
    folder.mkdir()
    names = [f"r{i}.json" for i in range(3)]
    for name, rec in zip(names, records[:3]):
        (folder / name).write_bytes(rec.read_bytes())
    (folder / "SHA256SUMS").write_text("".join(
        f"{file_digest(rec)}  {name}\n" for name, rec in zip(names, records[:3])))
    (folder / names[2]).write_bytes(records[2].read_bytes() + b" ")
    e = _refused(book, [folder / n for n in names], "tampered record")
    assert e.file == str(folder / names[2])


def test_tampered_record_archive_manifest(book, tmp_path, records):
    folder = tmp_path / "archive"
    folder.mkdir()
    (folder / "record.json").write_bytes(records[3].read_bytes() + b" ")
    (folder / "manifest.json").write_text(json.dumps(
        {"record": {"path": "record.json", "sha256": file_digest(records[3])}}))
    _refused(book, [folder / "record.json"], "manifest.json states")


def test_tampered_record_internal_digest(book, tmp_path, records):
    d = json.loads(records[1].read_text())        # amplifier run: has a data file
    d["run"]["files"][0]["sha256"] = "0" * 64
    p = tmp_path / "t.json"
    p.write_text(json.dumps(d), encoding="utf-8")
    e = _refused(book, [p], "tampered record")
    assert e.field.startswith("inputs[")


def test_not_a_logbook(tmp_path, records):
    text = tmp_path / "notes.sqlite"
    text.write_text("shopping list\n")
    with pytest.raises(DataError, match="not an SQLite database"):
        add_files(text, records[:1])
    assert text.read_text() == "shopping list\n"
    other = tmp_path / "other.sqlite"
    con = sqlite3.connect(other)
    con.execute("CREATE TABLE t (x)")
    con.commit()
    con.close()
    before = other.read_bytes()
    with pytest.raises(DataError, match="another SQLite database"):
        add_files(other, records[:1])
    assert other.read_bytes() == before


def test_newer_schema(book, records):
    con = sqlite3.connect(book)
    con.execute(f"PRAGMA user_version = {lb_schema.SCHEMA_VERSION + 1}")
    con.commit()
    con.close()
    before = book.read_bytes()
    with pytest.raises(DataError, match="newer version") as info:
        add_files(book, records[3:4])
    assert "\n" not in info.value.one_line() and book.read_bytes() == before


def test_read_only_book(book, records):
    before = book.read_bytes()
    os.chmod(book, stat.S_IRUSR | stat.S_IRGRP)
    try:
        with pytest.raises(DataError, match="read-only"):
            add_files(book, records[3:4])
        with Logbook.open(book) as lb:        # reading still works
            assert lb.count() == 3
    finally:
        os.chmod(book, stat.S_IRUSR | stat.S_IWUSR)
    assert book.read_bytes() == before


_HOLD_LOCK = """
import sqlite3, sys, time
con = sqlite3.connect(sys.argv[1], isolation_level=None)
con.execute("BEGIN EXCLUSIVE")
print("locked", flush=True)
time.sleep(float(sys.argv[2]))
"""


def test_locked_book_waits_then_refuses(book, records):
    before = book.read_bytes()
    holder = subprocess.Popen([sys.executable, "-c", _HOLD_LOCK, str(book), "20"],
                              stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "locked"
        t0 = time.monotonic()
        with pytest.raises(DataError, match="locked by another process") as info:
            add_files(book, records[3:4], wait_s=0.5)
        waited = time.monotonic() - t0
        assert 0.4 <= waited < 10           # bounded: about wait_s, not forever
        assert "\n" not in info.value.one_line()
    finally:
        holder.kill()
        holder.wait()
    assert book.read_bytes() == before
    add_files(book, records[3:4], wait_s=0.5)    # the lock gone, the add goes through


def test_stored_record_changed_outside_is_refused(book):
    con = sqlite3.connect(book)
    body = con.execute("SELECT body FROM records WHERE id = 2").fetchone()[0]
    changed = zlib.compress(zlib.decompress(body).replace(b"HQ-P7-7B", b"HQ-P7-7X"))
    con.execute("UPDATE records SET body = ? WHERE id = 2", (changed,))
    con.commit()
    con.close()
    with Logbook.open(book) as lb:
        assert lb.record(1).raw                                  # the others still read
        with pytest.raises(DataError, match="does not match its SHA-256"):
            lb.record(2)
        with pytest.raises(DataError, match="does not match"):
            export_book(lb, book.parent / "out")
    assert not (book.parent / "out").exists()


def test_migration_from_schema_1(tmp_path, records):
    p = tmp_path / "v1.sqlite"
    con = sqlite3.connect(p)
    for stmt in lb_schema._statements(lb_schema.DDL_V1):
        con.execute(stmt)
    raw = records[1].read_bytes()
    con.execute("INSERT INTO records (sha256, body, size, file_name, title, spec_sha256, "
                "manifest_sha256, chain, date_start, date_end, pump, operating_point, "
                "frequency_hz, added_utc) VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
                (file_digest(records[1]), zlib.compress(raw), len(raw), "r.json", "t", "", "",
                 "amplifier-voltmeter", "2026-06-09T18:00", "2026-06-10T04:00", "", "", None,
                 "2026-01-01T00:00:00Z"))
    con.execute(f"PRAGMA application_id = {lb_schema.APPLICATION_ID}")
    con.execute("PRAGMA user_version = 1")
    con.commit()
    con.close()
    with Logbook.open(p, write=True) as lb:
        assert {c["input"] for c in lb.record(1).calibrations} >= {"A_TR", "g"}
    con = sqlite3.connect(p)
    assert con.execute("PRAGMA user_version").fetchone()[0] == lb_schema.SCHEMA_VERSION
    con.close()
    other = tmp_path / "reindented.json"
    other.write_text(json.dumps(json.loads(raw), indent=1), encoding="utf-8")
    with pytest.raises(DataError, match="same content"):      # canonical digest filled in
        add_files(p, [other])


# --------------------------------------------------------------------------- kill safety
_ADD = """
import sys
from budget.logbook import add_files
add_files(sys.argv[1], sys.argv[2:])
"""


def test_sigkill_during_add_leaves_book_readable(book, records, tmp_path):
    before = _state(book)[1]
    # 120 records of ~60 kB that do not compress: more than SQLite's page cache (2 MiB by
    # default), so pages spill into the book file before COMMIT
    many = [variant(records[4], tmp_path / f"v{i}.json", i, pad=60_000) for i in range(120)]
    journal = Path(str(book) + "-journal")
    proc = subprocess.Popen([sys.executable, "-c", _ADD, str(book), *map(str, many)])
    t0 = time.monotonic()
    # original pages are copied into the rollback journal before the book is overwritten
    # (sqlite.org/atomiccommit.html): a journal with content means the write is under way
    while proc.poll() is None and time.monotonic() - t0 < 60 and not (
            journal.exists() and journal.stat().st_size > 0):
        time.sleep(0.001)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    assert proc.returncode == -signal.SIGKILL              # killed, not finished
    assert journal.exists()                                # a hot journal was left behind
    con = sqlite3.connect(book)
    assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    con.close()
    with Logbook.open(book) as lb:
        n = lb.count()
        assert n in (before, before + len(many))      # all or nothing
        assert [lb.record(i).raw for i in (1, 2, 3)] == [r.read_bytes() for r in records[:3]]


# --------------------------------------------------------------------------- stored bytes
def test_stored_bytes_are_a_zlib_stream(book, records):
    # the book's compressor (ISA-L) writes zlib streams (RFC 1950) that the standard
    # library's zlib reads back byte for byte, so any reader of the format keeps working
    from budget.logbook.rows import compress_body
    samples = [b"", b"x", os.urandom(70_000), b" " * 100_000] + [r.read_bytes() for r in records]
    for raw in samples:
        assert zlib.decompress(compress_body(raw)) == raw
    con = sqlite3.connect(book)
    for sha, body in con.execute("SELECT sha256, body FROM records"):
        assert hashlib.sha256(zlib.decompress(body)).hexdigest() == sha
    con.close()
