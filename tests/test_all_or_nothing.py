"""Commands that write several outputs write all of them or none (issue 17, class 6).

``run --json R --archive A`` and ``report --html H [-o P] --archive A`` are stopped at each of
their file-system steps in turn (the k-th call of os.open, os.fsync, os.mkdir, os.link or
os.replace raises KeyboardInterrupt, as Ctrl-C would there): the folder must then hold nothing
new, and the message must say so. A SIGTERM that arrives during the final renames is held until
they are done: everything is then written, and the message says that. Exit codes follow the
shell's convention 128 + signal number (SIGINT = 2, SIGTERM = 15; POSIX) — common practice.
"""

from __future__ import annotations

import os
import signal
import sys

import pytest

from budget.cli import main
from budget.errors import UsageError
from budget.staging import OutputSet

SPEC = """[budget]
title = "all-or-nothing case (invented)"
[model]
y = "a * b"
[monte_carlo]
trials = 1000
seed = 5
[inputs.a]
value = 2.0
standard_uncertainty = 0.1
[inputs.b]
value = 3.0
distribution = "rectangular"
half_width = 0.2
"""
STEPS = ("open", "fsync", "mkdir", "link", "replace")


class _Stop:
    """Count file-system calls; raise KeyboardInterrupt at call number ``at`` (once)."""

    def __init__(self, monkeypatch, at: int | None):
        self.calls, self.at = 0, at
        for name in STEPS:
            real = getattr(os, name)
            monkeypatch.setattr(os, name, self._wrap(real))

    def _wrap(self, real):
        def call(*a, **k):
            self.calls += 1
            if self.at is not None and self.calls == self.at:
                self.at = None
                raise KeyboardInterrupt
            return real(*a, **k)
        return call


def _tree(folder):
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*"))


def _run(tmp_path, monkeypatch, capsys, argv, at):
    monkeypatch.chdir(tmp_path)
    stop = _Stop(monkeypatch, at)
    code = main(argv)
    monkeypatch.undo()
    return code, capsys.readouterr().err, stop.calls


COMMANDS = {
    "run": ["run", "spec.toml", "--json", "r.json", "--archive", "arch"],
    "report": ["report", "spec.toml", "--html", "h.html", "--archive", "arch"],
}


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_stop_at_every_file_system_step_leaves_nothing(tmp_path, monkeypatch, capsys, command):
    argv = COMMANDS[command]
    warm = tmp_path / "warm"
    warm.mkdir()
    (warm / "spec.toml").write_text(SPEC, encoding="utf-8")
    # one full run first: a stop inside a first import (matplotlib's font cache, say) would
    # break that library for the rest of the process, which is not what is tested here
    assert _run(warm, monkeypatch, capsys, argv, None)[0] == 0
    tmp_path = tmp_path / "case"
    tmp_path.mkdir()
    (tmp_path / "spec.toml").write_text(SPEC, encoding="utf-8")
    before = _tree(tmp_path)
    # stop at step k = 1, 2, ... until k lies beyond the command's last step (it then ends
    # normally); the number of steps is counted, not assumed (caches may add or save some)
    for k in range(1, 400):
        code, err, calls = _run(tmp_path, monkeypatch, capsys, argv, k)
        monkeypatch.chdir(tmp_path)
        if code == 0 and calls < k:
            break
        assert code == 130, (k, err)
        assert err.strip().splitlines() == ["budget: interrupted; no output written"], (k, err)
        assert _tree(tmp_path) == before, (k, _tree(tmp_path))
    else:
        pytest.fail("the command never completed")
    assert k > 6  # staged files, archive objects, fsyncs and renames were all stopped at
    assert "r.json" in _tree(tmp_path) or "h.html" in _tree(tmp_path)


def test_report_pdf_failure_leaves_no_html(tmp_path, monkeypatch, capsys):
    # the example: --html H -o BAD used to leave H behind when the PDF failed
    (tmp_path / "spec.toml").write_text(SPEC, encoding="utf-8")
    monkeypatch.chdir(tmp_path)
    code = main(["report", "spec.toml", "--html", "h.html", "-o", "missing/p.pdf"])
    err = capsys.readouterr().err
    assert code == 2 and len(err.strip().splitlines()) == 1
    assert _tree(tmp_path) == ["spec.toml"]


@pytest.mark.skipif(sys.platform == "win32", reason="POSIX signals")
def test_sigterm_during_the_commit_is_held_and_reported_truthfully(tmp_path, monkeypatch,
                                                                   capsys):
    (tmp_path / "spec.toml").write_text(SPEC, encoding="utf-8")
    monkeypatch.chdir(tmp_path)
    real_replace = os.replace
    sent = []

    def replace(src, dst, *a, **k):
        # the first rename onto a final name: a SIGTERM arrives right now
        if not sent and str(dst) == "r.json":
            sent.append(dst)
            os.kill(os.getpid(), signal.SIGTERM)
        return real_replace(src, dst, *a, **k)

    monkeypatch.setattr(os, "replace", replace)
    code = main(COMMANDS["run"])
    monkeypatch.undo()
    err = capsys.readouterr().err
    assert sent, "the commit renamed nothing"
    assert code == 128 + signal.SIGTERM, err
    assert "after the outputs were complete" in err and "r.json" in err and "arch" in err
    assert (tmp_path / "r.json").is_file() and (tmp_path / "arch" / "manifest.json").is_file()
    assert not [p for p in _tree(tmp_path) if p.endswith((".part", ".old"))]


def test_commit_failure_restores_the_previous_files(tmp_path, monkeypatch):
    # two existing outputs; the second rename fails: the first is put back as it was
    a, b = tmp_path / "a.txt", tmp_path / "b.txt"
    a.write_text("old a")
    b.write_text("old b")
    real_replace = os.replace
    count = []

    def replace(src, dst, *x, **k):
        if str(dst) == str(b) and not str(src).endswith(".old"):
            count.append(1)
            raise OSError(28, "No space left on device", str(dst))
        return real_replace(src, dst, *x, **k)

    monkeypatch.setattr(os, "replace", replace)
    with pytest.raises(OSError), OutputSet() as out:
        out.file(a, "new a")
        out.file(b, "new b")
        out.commit()
    monkeypatch.undo()
    assert count and a.read_text() == "old a" and b.read_text() == "old b"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.txt", "b.txt"]


def test_symlink_target_is_written_through_the_link(tmp_path):
    # with force a link is kept and its target replaced; without, refused (README "Output
    # files"; tests/test_output_paths.py has the rest)
    real = tmp_path / "real.txt"
    real.write_text("old")
    link = tmp_path / "link.txt"
    link.symlink_to(real)
    with OutputSet() as out:
        with pytest.raises(UsageError, match="symbolic link"):
            out.file(link, "new")
    with OutputSet() as out:
        out.file(link, "new", force=True)
        out.commit()
    assert link.is_symlink() and real.read_text() == "new"


def test_report_with_pdf_stopped_at_first_middle_and_last_step(tmp_path, monkeypatch, capsys):
    # the PDF takes seconds to render: three of its steps rather than all of them
    argv = ["report", "spec.toml", "--html", "h.html", "-o", "p.pdf", "--archive", "arch"]
    warm = tmp_path / "warm"
    warm.mkdir()
    (warm / "spec.toml").write_text(SPEC, encoding="utf-8")
    assert _run(warm, monkeypatch, capsys, argv, None)[0] == 0
    count = tmp_path / "count"   # a second run counts the steps once the caches are made
    count.mkdir()
    (count / "spec.toml").write_text(SPEC, encoding="utf-8")
    code, _, total = _run(count, monkeypatch, capsys, argv, None)
    assert code == 0
    case = tmp_path / "case"
    case.mkdir()
    (case / "spec.toml").write_text(SPEC, encoding="utf-8")
    for k in (1, total // 2, total):
        code, err, _ = _run(case, monkeypatch, capsys, argv, k)
        assert code == 130, (k, err)
        assert _tree(case) == ["spec.toml"], (k, _tree(case))


def _book_ids(book):
    import sqlite3
    con = sqlite3.connect(str(book))
    try:
        return [r[0] for r in con.execute("SELECT id FROM records ORDER BY id")]
    finally:
        con.close()


@pytest.mark.parametrize("existing", [False, True], ids=["new-book", "existing-book"])
def test_run_logbook_stopped_at_every_step_changes_neither_files_nor_book(
        tmp_path, monkeypatch, capsys, existing):
    # run --logbook: the record, the archive and the book's new row are one output set
    argv = ["run", "spec.toml", "--json", "r.json", "--archive", "arch", "--logbook",
            "--book", "b.sqlite"]
    warm = tmp_path / "warm"
    warm.mkdir()
    (warm / "spec.toml").write_text(SPEC, encoding="utf-8")
    assert _run(warm, monkeypatch, capsys, argv, None)[0] == 0
    case = tmp_path / "case"
    case.mkdir()
    (case / "spec.toml").write_text(SPEC, encoding="utf-8")
    if existing:   # a book holding another record (another seed: another digest)
        (case / "other.toml").write_text(SPEC.replace("seed = 5", "seed = 6"), "utf-8")
        monkeypatch.chdir(case)
        assert main(["run", "other.toml", "--logbook", "--book", "b.sqlite"]) == 0
        capsys.readouterr()
        assert _book_ids(case / "b.sqlite") == [1]
    before = _tree(case)
    for k in range(1, 400):
        code, err, calls = _run(case, monkeypatch, capsys, argv, k)
        if code == 0 and calls < k:
            break
        assert code == 130, (k, err)
        assert err.strip().splitlines() == ["budget: interrupted; no output written"], (k, err)
        assert _tree(case) == before, (k, _tree(case))
        if existing:
            assert _book_ids(case / "b.sqlite") == [1], k
    else:
        pytest.fail("the command never completed")
    assert k > 6
    assert "r.json" in _tree(case) and _book_ids(case / "b.sqlite") == ([1, 2] if existing
                                                                         else [1])


def test_run_logbook_refused_commit_puts_the_files_back(tmp_path, monkeypatch, capsys):
    # the book's COMMIT fails after the files were renamed (a full disk, say): the files
    # are taken back and the book keeps what it had
    from budget.logbook.store import Logbook
    (tmp_path / "spec.toml").write_text(SPEC, encoding="utf-8")
    monkeypatch.chdir(tmp_path)

    def refuse(self):
        self.rollback_pending()
        raise OSError(28, "No space left on device", str(self.path))

    monkeypatch.setattr(Logbook, "commit_pending", refuse)
    code = main(["run", "spec.toml", "--json", "r.json", "--archive", "arch", "--logbook",
                 "--book", "b.sqlite"])
    err = capsys.readouterr().err
    assert code == 2 and len(err.strip().splitlines()) == 1, err
    assert _tree(tmp_path) == ["spec.toml"], _tree(tmp_path)


def test_run_logbook_refused_record_writes_no_file(tmp_path, monkeypatch, capsys):
    # the same record twice: the second run is refused by the book, and its --json and
    # --archive are not written either
    (tmp_path / "spec.toml").write_text(SPEC, encoding="utf-8")
    monkeypatch.chdir(tmp_path)
    assert main(["run", "spec.toml", "--logbook", "--book", "b.sqlite"]) == 0
    capsys.readouterr()
    before = _tree(tmp_path)
    code = main(["run", "spec.toml", "--json", "r.json", "--archive", "arch", "--logbook",
                 "--book", "b.sqlite"])
    err = capsys.readouterr().err
    assert code == 2 and "already in the book" in err and len(err.strip().splitlines()) == 1
    assert _tree(tmp_path) == before and _book_ids(tmp_path / "b.sqlite") == [1]
