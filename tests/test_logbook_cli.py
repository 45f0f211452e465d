"""``budget logbook ...`` and ``budget run --logbook`` as a user runs them: exit codes, one-line
errors, nothing changed in the book on a refusal (DESIGN.md contract: exit 2, one line on
stderr naming file and field, no traceback, nothing written). Digests against hashlib.
"""

from __future__ import annotations

import json
import os
import sqlite3
import stat
import subprocess
import sys
from pathlib import Path

import pytest
from logbook_helpers import SEASON, file_digest, season_records

from budget.cli import main


@pytest.fixture(scope="module")
def records(tmp_path_factory) -> list[Path]:
    return season_records(tmp_path_factory.mktemp("cli-season"))


@pytest.fixture
def book(tmp_path, records) -> Path:
    p = tmp_path / "book.sqlite"
    assert main(["logbook", "add", *map(str, records[:40]), "--book", str(p)]) == 0
    return p


def _refused(capsys, argv, book: Path, *words: str) -> str:
    before = book.read_bytes() if book.exists() else None
    capsys.readouterr()
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err, err
    for w in words:
        assert w in err, err
    assert (book.read_bytes() if book.exists() else None) == before
    return err


def test_add_list_show_export(book, records, tmp_path, capsys):
    capsys.readouterr()
    assert main(["logbook", "add", *map(str, records[40:]), "--book", str(book)]) == 0
    assert "added 8 records" in capsys.readouterr().out
    out = tmp_path / "list.json"
    assert main(["logbook", "list", "--book", str(book), "--since", "2027-01-01",
                 "--chain", "resistor-voltmeter", "--json", str(out)]) == 0
    listed = json.loads(out.read_text())
    # a record counts when its measurement ends on or after --since
    assert listed and all(e["chain"] == "resistor-voltmeter" and e["date_end"] >= "2027-01-01"
                          for e in listed)
    assert listed[0]["date_start"] == "2026-12-31T18:00"
    assert main(["logbook", "show", "#1", "--book", str(book)]) == 0
    shown = capsys.readouterr().out
    assert file_digest(records[0]) in shown and "HQML-R-2026-0310" in shown
    exp = tmp_path / "exported"
    assert main(["logbook", "export", str(exp), "--book", str(book)]) == 0
    got = sorted(p.read_bytes() for p in exp.glob("*.json"))
    assert got == sorted(r.read_bytes() for r in records)        # byte-identical


def test_trend_json_flags_name_the_calibration(book, records, tmp_path, capsys):
    assert main(["logbook", "add", *map(str, records[40:]), "--book", str(book)]) == 0
    out = tmp_path / "trend.json"
    html = tmp_path / "trend.html"
    assert main(["logbook", "trend", "--book", str(book), "--json", str(out),
                 "--html", str(html)]) == 0
    t = json.loads(out.read_text())
    truth = json.loads((SEASON / "truth.json").read_text(encoding="utf-8"))
    step = [f for f in t["flags"] if f["kind"] == "step"]
    assert len(step) == 1
    f = step[0]
    assert f["chain"] == "resistor-voltmeter" and f["statistic"] == "E_n"
    assert f["date_from"] < truth["resistor_recalibration"] < f["date_to"]
    assert f["calibrations"][0]["identifier"] == truth["resistor_certificate_after"][1]
    assert truth["resistor_certificate_after"][1] in html.read_text(encoding="utf-8")


def test_run_with_logbook(tmp_path, capsys):
    spec = sorted((SEASON / "specs").glob("*.toml"))[0]
    book = tmp_path / "run.sqlite"
    rec = tmp_path / "r.json"
    assert main(["run", str(spec), "--logbook", "--book", str(book), "--json", str(rec)]) == 0
    assert "added to the logbook" in capsys.readouterr().out
    assert main(["logbook", "show", "1", "--book", str(book)]) == 0
    assert file_digest(rec) in capsys.readouterr().out         # the same bytes as --json
    again = tmp_path / "again.json"
    _refused(capsys, ["run", str(spec), "--logbook", "--book", str(book), "--json",
                      str(again)], book, "already in the book")
    assert not again.exists()


def test_bad_records(book, records, tmp_path, capsys):
    spec = tmp_path / "spec.toml"
    spec.write_text("[budget]\n", encoding="utf-8")
    _refused(capsys, ["logbook", "add", str(spec), "--book", str(book)], book, "spec.toml",
             "not valid JSON")
    d = json.loads(records[45].read_text())
    d["schema"] = "qcs-budget/record-9"
    other = tmp_path / "other.json"
    other.write_text(json.dumps(d))
    _refused(capsys, ["logbook", "add", str(records[45]), str(other), "--book", str(book)],
             book, "other.json", "schema")
    folder = tmp_path / "sums"
    folder.mkdir()
    (folder / "t.json").write_bytes(records[45].read_bytes().replace(b"HQ-P7-7B", b"HQ-P8"))
    (folder / "SHA256SUMS").write_text(f"{file_digest(records[45])}  t.json\n")
    _refused(capsys, ["logbook", "add", str(folder / "t.json"), "--book", str(book)], book,
             "tampered record")
    _refused(capsys, ["logbook", "add", str(records[0]), "--book", str(book)], book,
             "already in the book")


def test_bad_books(book, records, tmp_path, capsys):
    text = tmp_path / "notes.txt"
    text.write_text("not a book\n")
    _refused(capsys, ["logbook", "list", "--book", str(text)], text, "not an SQLite")
    con = sqlite3.connect(book)
    con.execute("PRAGMA user_version = 99")
    con.commit()
    con.close()
    _refused(capsys, ["logbook", "add", str(records[45]), "--book", str(book)], book,
             "newer version")
    _refused(capsys, ["logbook", "trend", "--book", str(book)], book, "newer version")


def test_read_only_book(book, records, capsys):
    os.chmod(book, stat.S_IRUSR)
    try:
        _refused(capsys, ["logbook", "add", str(records[45]), "--book", str(book)], book,
                 "read-only")
    finally:
        os.chmod(book, stat.S_IRUSR | stat.S_IWUSR)


def test_locked_book(book, records, capsys):
    holder = subprocess.Popen([sys.executable, "-c", (
        "import sqlite3, sys, time\ncon = sqlite3.connect(sys.argv[1], isolation_level=None)\n"
        "con.execute('BEGIN EXCLUSIVE')\nprint('locked', flush=True)\ntime.sleep(30)"),
        str(book)], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "locked"
        _refused(capsys, ["logbook", "add", str(records[45]), "--book", str(book), "--wait",
                          "0.3"], book, "locked by another process", "0.3 s")
    finally:
        holder.kill()
        holder.wait()


def test_usage_errors(book, capsys):
    _refused(capsys, ["logbook", "list", "--book", str(book), "--since", "May"], book,
             "--since")
    _refused(capsys, ["logbook", "show", "999", "--book", str(book)], book, "no record #999")
    _refused(capsys, ["logbook", "trend", "--book", str(book), "--measurand", "delta_l"], book,
             "did you mean 'delta_I'")
    missing = book.parent / "none.sqlite"
    _refused(capsys, ["logbook", "list", "--book", str(missing)], missing, "no logbook here")
    assert not missing.exists()
