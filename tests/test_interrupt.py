"""An interrupted run leaves no partial file (issue 6, item 6).

A real ``python -m budget run`` is started on a long Monte Carlo and stopped with SIGINT and
with SIGTERM while it samples. Its stderr is a pseudo-terminal so that the progress bar
appears (it is drawn only on a terminal): the signal is sent once the bar shows, i.e. once the
run is inside the Monte Carlo loop, whatever the machine's speed. Exit codes follow the shell's
convention 128 + signal number (SIGINT = 2, SIGTERM = 15 on Linux and macOS, POSIX.1) — common
practice.
"""

from __future__ import annotations

import os
import select
import signal
import subprocess
import sys
import time

import pytest
from evidence_helpers import write_spec_folder

from budget import cli

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="POSIX signals and ptys")

# Invented model, chosen only to be slow per trial (several transcendental functions).
SLOW_SPEC = """\
[budget]
title = "Slow model for the interruption test (invented)"

[model]
y = "exp(sin(a)) * cos(b) + sqrt(abs(a * b)) + tanh(a - b) + log(1 + b**2) + arctan(a)"

[monte_carlo]
trials = 1000
seed = 1

[inputs.a]
value = 1.0
standard_uncertainty = 0.1

[inputs.b]
value = 2.0
standard_uncertainty = 0.1
"""

# 5e7 trials: minutes of sampling on any machine (250 chunks of 200 000), well below the
# spec loader's limit of 1e8.
TRIALS = "50000000"


def _start(tmp_path, tag):
    import pty
    spec = tmp_path / f"slow_{tag}.toml"
    spec.write_text(SLOW_SPEC, encoding="utf-8")
    out = tmp_path / f"out_{tag}.json"
    master, slave = pty.openpty()
    proc = subprocess.Popen(
        [sys.executable, "-m", "budget", "run", str(spec), "--json", str(out),
         "--trials", TRIALS, "--archive", str(tmp_path / f"arch_{tag}")],
        stdin=subprocess.DEVNULL, stdout=subprocess.PIPE, stderr=slave, cwd=tmp_path,
        # a shell starts background jobs with SIGINT ignored, and Python then installs no
        # KeyboardInterrupt handler: give the child the default disposition a terminal user has
        preexec_fn=lambda: signal.signal(signal.SIGINT, signal.default_int_handler))
    os.close(slave)
    return proc, master, out


def _read(master, until=None, timeout=120.0) -> bytes:
    """Read the pty until ``until`` appears, or until EOF (the child closed it)."""
    buf = b""
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        r, _, _ = select.select([master], [], [], 0.2)
        if r:
            try:
                chunk = os.read(master, 4096)
            except OSError:  # EIO: the child has exited and closed the terminal
                return buf
            if not chunk:
                return buf
            buf += chunk
            if until is not None and until in buf:
                return buf
    return buf


def test_sigint_and_sigterm_leave_no_partial_file(tmp_path):
    runs = {name: _start(tmp_path, name) for name in ("SIGINT", "SIGTERM")}
    try:
        seen = {}
        for name, (proc, master, _out) in runs.items():
            seen[name] = _read(master, until=b"Monte Carlo [")
            assert b"Monte Carlo [" in seen[name], seen[name][-500:]
            assert proc.poll() is None  # still sampling when the signal arrives
            proc.send_signal(getattr(signal, name))
        for name, (proc, master, out) in runs.items():
            proc.wait(timeout=60)
            text = (seen[name] + _read(master, timeout=10)).decode("utf-8", "replace")
            stdout = proc.stdout.read().decode()
            lines = [ln for part in text.split("\n") for ln in part.split("\r")
                     if ln.strip() and not ln.startswith("Monte Carlo [")]
            expected = 128 + getattr(signal, name)
            assert proc.returncode == expected, (name, proc.returncode, text)
            assert len(lines) == 1 and lines[0].startswith("budget: "), (lines, text[-300:])
            assert "no output written" in lines[0] and "Traceback" not in text
            assert not out.exists()
            assert stdout == ""  # the table is printed only after the computation
        leftovers = [p.name for p in tmp_path.rglob("*") if p.name.endswith(".part")
                     or p.name.startswith("arch_") or p.name.startswith("out_")]
        assert leftovers == []
    finally:
        for proc, master, _ in runs.values():
            if proc.poll() is None:
                proc.kill()
                proc.wait()
            proc.stdout.close()
            os.close(master)


def test_sigterm_while_writing_removes_the_temporary_file(tmp_path, monkeypatch, capsys):
    """SIGTERM arriving in the middle of write_atomic: the handler installed by cli.main turns
    it into an exception, write_atomic removes its temporary file, nothing is left."""
    import budget.outputs as outputs
    spec = write_spec_folder(tmp_path)
    out = tmp_path / "record.json"
    real_fsync = os.fsync

    def fsync_then_terminate(fd):
        real_fsync(fd)
        os.kill(os.getpid(), signal.SIGTERM)
        time.sleep(0.5)  # the handler runs here, between bytecodes
    monkeypatch.setattr(outputs.os, "fsync", fsync_then_terminate)
    previous = signal.getsignal(signal.SIGTERM)
    code = cli.main(["run", str(spec), "--json", str(out)])
    err = capsys.readouterr().err
    assert code == 128 + signal.SIGTERM
    assert err.strip() == "budget: terminated; no output written"
    assert not out.exists() and not list(tmp_path.glob("*.part"))
    assert signal.getsignal(signal.SIGTERM) == previous  # main() restores the handler
