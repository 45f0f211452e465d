"""A run is kept once: a record of a measurement already in the book is refused.

Why (common practice, ISO 13528 and JCGM 100 §4.2 on independent observations): a weighted
mean and its χ² assume each run is an independent measurement. A record re-made from the same
spec and the same data files (another seed or run time only) holds no new evidence; counted
twice it doubles that run's weight and adds a false degree of freedom. The review that found
it added such a record and saw the chain's ν go from 23 to 24.
"""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import pytest
from logbook_helpers import season_records

from budget.cli import main
from budget.errors import DataError
from budget.logbook import Logbook, add_files
from budget.logbook import schema as lb_schema


@pytest.fixture(scope="module")
def records(tmp_path_factory) -> list[Path]:
    return season_records(tmp_path_factory.mktemp("season"), first=3)


def _rerun(src: Path, dst: Path, seed: int) -> Path:
    """The record of the same spec and files run again: another seed (what `budget run` gives
    when the spec sets none), nothing else."""
    d = json.loads(src.read_text(encoding="utf-8"))
    d["run"]["seed"] = seed
    dst.write_text(json.dumps(d, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")
    return dst


def test_rerun_of_the_same_spec_and_files_is_refused_and_changes_nothing(tmp_path, records):
    book = tmp_path / "b.sqlite"
    add_files(book, records)
    before = book.read_bytes()
    again = _rerun(records[1], tmp_path / "again.json", 987654321)
    with pytest.raises(DataError, match="the same measurement as #2") as info:
        add_files(book, [again])
    assert "\n" not in info.value.one_line()
    assert book.read_bytes() == before
    with Logbook.open(book) as lb:
        assert lb.count() == 3


def test_two_reruns_in_one_add_are_refused(tmp_path, records):
    a = _rerun(records[0], tmp_path / "a.json", 1)
    b = _rerun(records[0], tmp_path / "b.json", 2)
    book = tmp_path / "b.sqlite"
    with pytest.raises(DataError, match="the same measurement as .*a.json"):
        add_files(book, [a, b])
    assert not book.exists()                   # all or nothing: not even an empty book


def test_other_runs_are_not_refused(tmp_path, records):
    # the season's runs come from different specs (their own Type A record and date): all kept
    book = tmp_path / "b.sqlite"
    assert len(add_files(book, records)) == 3


def test_cli_refuses_a_rerun_exit_2_one_line(tmp_path, records, capsys):
    book = tmp_path / "b.sqlite"
    assert main(["logbook", "add", "--book", str(book), str(records[0])]) == 0
    capsys.readouterr()
    again = _rerun(records[0], tmp_path / "again.json", 5)
    assert main(["logbook", "add", "--book", str(book), str(again)]) == 2
    err = capsys.readouterr().err.strip()
    assert "the same measurement as #1" in err and len(err.splitlines()) == 1


def test_schema_2_book_is_migrated_and_a_read_only_one_still_read(tmp_path, records):
    p = tmp_path / "v2.sqlite"
    add_files(p, records[:2])
    con = sqlite3.connect(p)                   # make it a version-2 book: drop what 3 adds
    con.execute("DROP INDEX records_run")
    con.execute("PRAGMA user_version = 2")
    con.commit()
    con.close()
    p.chmod(0o444)
    try:
        with Logbook.open(p) as lb:            # read-only: read as it is, no migration
            assert lb.count() == 2
    finally:
        p.chmod(0o644)
    add_files(p, records[2:])                  # writing migrates
    con = sqlite3.connect(p)
    try:
        assert con.execute("PRAGMA user_version").fetchone()[0] == lb_schema.SCHEMA_VERSION
        assert con.execute("SELECT count(*) FROM sqlite_master WHERE name = 'records_run'"
                           ).fetchone()[0] == 1
    finally:
        con.close()
    with pytest.raises(DataError, match="the same measurement"):
        add_files(p, [_rerun(records[0], tmp_path / "again.json", 3)])
