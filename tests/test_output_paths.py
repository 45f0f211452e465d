"""Safe output paths (issue 12 item 7; README "Output files").

Every special file is made in pytest's temporary folder; nothing under /dev is touched. The
rules checked are the project's decisions (README "Output files"); the facts of the OS they
rest on are POSIX: rename(2) replaces the directory entry, whatever it was (so a link or FIFO
would become a regular file); open(2) on a FIFO or character device writes to it in place; a
process's /proc/self/fd/N names its open descriptor N (Linux proc(5)); umask 022 turns the
0666 of a new file into 0644 (POSIX open(2)/umask(2)) — common practice.
"""

from __future__ import annotations

import json
import os
import stat
import subprocess
import sys
import threading
from pathlib import Path

import pytest

from budget.cli import main
from budget.errors import UsageError
from budget.outputs import classify, write_atomic
from budget.staging import OutputSet

ROOT = Path(__file__).resolve().parents[1]
SPEC = """[budget]
title = "output path case (invented)"
[model]
y = "a * b"
[monte_carlo]
enabled = false
[inputs.a]
value = 2.0
standard_uncertainty = 0.1
[inputs.b]
value = 3.0
standard_uncertainty = 0.2
"""


def _spec(tmp_path) -> Path:
    p = tmp_path / "spec.toml"
    p.write_text(SPEC, encoding="utf-8")
    return p


def _budget(*argv, cwd, stdout=subprocess.PIPE):
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-m", "budget", *argv], cwd=cwd, env=env,
                          stdout=stdout, stderr=subprocess.PIPE, timeout=120)


def test_dash_is_standard_output_and_the_table_moves_to_stderr(tmp_path, capsys):
    spec = _spec(tmp_path)
    code = main(["run", str(spec), "--json", "-"])
    out, err = capsys.readouterr()
    assert code == 0
    rec = json.loads(out)                      # stdout holds the record and nothing else
    assert rec["measurands"] and "inputs" in rec
    assert "record written to standard output" in err
    assert not (tmp_path / "-").exists() and not Path("-").exists()


def test_dash_pipes_into_another_program(tmp_path):
    # budget run S --json - | python -c 'json.load(stdin)': the reader sees a whole record
    spec = _spec(tmp_path)
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    producer = subprocess.Popen([sys.executable, "-m", "budget", "run", str(spec), "--json", "-"],
                                cwd=tmp_path, env=env, stdout=subprocess.PIPE,
                                stderr=subprocess.PIPE)
    reader = subprocess.run([sys.executable, "-c", "import json,sys; "
                             "print(sorted(json.load(sys.stdin)))"],
                            stdin=producer.stdout, capture_output=True, text=True, timeout=120)
    producer.stdout.close()
    assert producer.wait(timeout=120) == 0
    assert reader.returncode == 0 and "'measurands'" in reader.stdout


def test_two_outputs_on_standard_output_refused(tmp_path, capsys):
    spec = _spec(tmp_path)
    code = main(["report", str(spec), "--html", "-", "-o", "-"])
    err = capsys.readouterr().err
    assert code == 2 and len(err.strip().splitlines()) == 1 and "standard output" in err


def test_fifo_is_written_in_place_never_replaced(tmp_path, capsys):
    spec = _spec(tmp_path)
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    got = []
    reader = threading.Thread(target=lambda: got.append(fifo.read_bytes()))
    reader.start()
    code = main(["run", str(spec), "--json", str(fifo)])
    reader.join(timeout=60)
    assert code == 0, capsys.readouterr().err
    assert stat.S_ISFIFO(os.lstat(fifo).st_mode)          # still the FIFO
    assert json.loads(got[0].decode("utf-8"))["measurands"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["pipe", "spec.toml"]


def test_descriptor_link_like_dev_stdout_is_written_through(tmp_path):
    # tmp/stdout -> /proc/self/fd/1, as /dev/stdout is on Linux: the link stays, the record
    # arrives on the process's standard output (a pipe here), the table on stderr
    if not Path("/proc/self/fd/1").exists():
        pytest.skip("no /proc/self/fd on this system")
    spec = _spec(tmp_path)
    link = tmp_path / "stdout"
    link.symlink_to("/proc/self/fd/1")
    r = _budget("run", str(spec), "--json", str(link), cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert link.is_symlink() and os.readlink(link) == "/proc/self/fd/1"
    assert json.loads(r.stdout)["measurands"]
    assert b"record written to" in r.stderr


def test_descriptor_onto_a_file_appends_where_the_shell_left_it(tmp_path):
    # budget run S --json /dev/stdout > out.json: out.json holds the whole record, stays the
    # same file (inode) and the link is untouched
    if not Path("/proc/self/fd/1").exists():
        pytest.skip("no /proc/self/fd on this system")
    spec = _spec(tmp_path)
    link = tmp_path / "stdout"
    link.symlink_to("/proc/self/fd/1")
    out = tmp_path / "out.json"
    with open(out, "wb") as fh:
        inode = os.fstat(fh.fileno()).st_ino
        r = _budget("run", str(spec), "--json", str(link), cwd=tmp_path, stdout=fh)
    assert r.returncode == 0, r.stderr
    assert os.stat(out).st_ino == inode and link.is_symlink()
    assert json.loads(out.read_text(encoding="utf-8"))["measurands"]


def test_process_substitution_path(tmp_path):
    # bash's >(cmd) passes /dev/fd/N, a pipe: written in place, exit 0, no traceback
    bash = "/bin/bash"
    if not Path(bash).exists() or not Path("/dev/fd").exists():
        pytest.skip("needs bash and /dev/fd")
    spec = _spec(tmp_path)
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    cmd = (f"{sys.executable} -m budget run {spec} --json >({sys.executable} -c "
           "'import json,sys; json.load(sys.stdin); open(\"ok\",\"w\").write(\"ok\")'); wait")
    r = subprocess.run([bash, "-c", cmd], cwd=tmp_path, env=env, capture_output=True,
                       text=True, timeout=120)
    assert r.returncode == 0 and "Traceback" not in r.stderr, r.stderr
    for _ in range(100):                      # the reader may finish after bash returns
        if (tmp_path / "ok").exists():
            break
        threading.Event().wait(0.05)
    assert (tmp_path / "ok").read_text() == "ok"


def test_symlink_to_a_file_refused_without_force(tmp_path, capsys):
    spec = _spec(tmp_path)
    real = tmp_path / "real.json"
    real.write_text("keep", encoding="utf-8")
    link = tmp_path / "link.json"
    link.symlink_to(real)
    code = main(["run", str(spec), "--json", str(link)])
    err = capsys.readouterr().err
    assert code == 2 and len(err.strip().splitlines()) == 1
    assert "symbolic link" in err and "--force" in err
    assert real.read_text(encoding="utf-8") == "keep" and link.is_symlink()
    code = main(["run", str(spec), "--json", str(link), "--force"])
    assert code == 0
    assert link.is_symlink() and json.loads(real.read_text(encoding="utf-8"))["measurands"]


@pytest.mark.parametrize("argv", [
    ["validate", "--json", "{o}"],
    ["explain", "{spec}", "--json", "{o}"],
    ["report", "{spec}", "--html", "{o}"],
])
def test_every_writing_command_refuses_a_link_to_a_file(tmp_path, capsys, argv):
    spec = _spec(tmp_path)
    real = tmp_path / "real"
    real.write_text("keep", encoding="utf-8")
    link = tmp_path / "link"
    link.symlink_to(real)
    code = main([a.format(o=link, spec=spec) for a in argv])
    err = capsys.readouterr().err
    assert code == 2 and "symbolic link" in err and real.read_text(encoding="utf-8") == "keep"


def test_dangling_link_refused(tmp_path):
    link = tmp_path / "dangling"
    link.symlink_to(tmp_path / "nowhere")
    with pytest.raises(UsageError, match="missing file"):
        classify(link, force=True)
    assert link.is_symlink() and not (tmp_path / "nowhere").exists()


def test_folder_refused(tmp_path):
    with pytest.raises(UsageError, match="folder"):
        classify(tmp_path)


def test_new_file_mode_follows_umask(tmp_path):
    old = os.umask(0o022)
    try:
        write_atomic(tmp_path / "a.json", "{}")
        with OutputSet() as out:
            out.file(tmp_path / "b.json", "{}")
            out.folder(tmp_path / "arch", lambda d: (d / "x").write_text("x"))
            out.commit()
        os.umask(0o077)
        write_atomic(tmp_path / "c.json", "{}")
    finally:
        os.umask(old)
    assert stat.S_IMODE(os.stat(tmp_path / "a.json").st_mode) == 0o644
    assert stat.S_IMODE(os.stat(tmp_path / "b.json").st_mode) == 0o644
    assert stat.S_IMODE(os.stat(tmp_path / "arch").st_mode) == 0o755
    assert stat.S_IMODE(os.stat(tmp_path / "c.json").st_mode) == 0o600


def test_run_output_and_archive_modes(tmp_path, capsys):
    spec = _spec(tmp_path)
    old = os.umask(0o022)
    try:
        assert main(["run", str(spec), "--json", str(tmp_path / "r.json"),
                     "--archive", str(tmp_path / "arch")]) == 0
    finally:
        os.umask(old)
    assert stat.S_IMODE(os.stat(tmp_path / "r.json").st_mode) == 0o644
    assert stat.S_IMODE(os.stat(tmp_path / "arch").st_mode) == 0o755
    for f in (tmp_path / "arch").rglob("*"):
        want = 0o755 if f.is_dir() else 0o644
        assert stat.S_IMODE(os.stat(f).st_mode) == want, f


def test_replaced_file_keeps_its_mode(tmp_path):
    p = tmp_path / "r.json"
    p.write_text("old", encoding="utf-8")
    os.chmod(p, 0o640)
    write_atomic(p, "new")
    assert p.read_text(encoding="utf-8") == "new"
    assert stat.S_IMODE(os.stat(p).st_mode) == 0o640


def test_identity_key_stays_private(tmp_path, monkeypatch, capsys):
    monkeypatch.setenv("BUDGET_PASSPHRASE", "correct horse battery")
    old = os.umask(0o022)
    try:
        code = main(["identity", "create", "--name", "Test Signer (invented)",
                     "--out", str(tmp_path / "id")])
    finally:
        os.umask(old)
    assert code == 0, capsys.readouterr().err
    assert stat.S_IMODE(os.stat(tmp_path / "id" / "identity.p12").st_mode) == 0o600
    assert stat.S_IMODE(os.stat(tmp_path / "id" / "identity.pem").st_mode) == 0o644


def test_target_that_became_a_link_during_the_run_is_not_replaced(tmp_path):
    p = tmp_path / "r.json"
    other = tmp_path / "other"
    other.write_text("keep", encoding="utf-8")
    with OutputSet() as out:
        out.file(p, "new")
        p.symlink_to(other)            # appears between staging and commit
        with pytest.raises(UsageError, match="changed while"):
            out.commit()
    assert p.is_symlink() and other.read_text(encoding="utf-8") == "keep"
    assert sorted(x.name for x in tmp_path.iterdir()) == ["other", "r.json"]


def test_sign_still_needs_force_to_replace(tmp_path):
    p = tmp_path / "signed.pdf"
    p.write_bytes(b"%PDF")
    with pytest.raises(UsageError, match="--force"):
        classify(p, replace=False)
    assert classify(p, replace=False, force=True).kind == "file"
