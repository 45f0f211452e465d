"""Walk the bad-input corpus (tests/bad_inputs/*): every case must end in exit 2 with one clear
line on stderr naming the file/line/row and field, no traceback, and nothing written.

The rule itself is the project's contract (DESIGN.md "Contracts other parts rely on"); each
case's expect.txt names the words its message must contain.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from budget.cli import main

CORPUS = Path(__file__).parent / "bad_inputs"
CASES = sorted(p for p in CORPUS.iterdir() if p.is_dir())


def test_corpus_is_large_enough():
    # issue 6 asks for at least 40 malformed inputs across every module
    assert len(CASES) >= 40


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_bad_input(case: Path, tmp_path: Path, monkeypatch, capsys):
    work = tmp_path / case.name
    shutil.copytree(case, work)
    before = {p.relative_to(work) for p in work.rglob("*")}
    args_file = work / "args.txt"
    args = (args_file.read_text().split("\n") if args_file.exists()
            else ["run", "spec.toml", "--json", "out.json"])
    args = [a for a in args if a]
    monkeypatch.chdir(work)
    code = main(args)
    err = capsys.readouterr().err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert code == 2, f"exit code {code}, stderr: {err!r}"
    assert len(lines) == 1, f"expected one line on stderr, got: {err!r}"
    assert "Traceback" not in err
    expect = work / "expect.txt"
    if expect.exists():
        for needle in filter(None, expect.read_text().splitlines()):
            assert needle in lines[0], f"{needle!r} not in {lines[0]!r}"
    after = {p.relative_to(work) for p in work.rglob("*")}
    assert after == before, f"files written: {sorted(map(str, after - before))}"
