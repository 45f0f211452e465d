"""The demo runner's two processes (worked_examples/run_demo.py, issue 14): output in step
order with each stream kept, and a failing step stops the demo with its message.

No reference values: the checks are about order and streams of text the test itself writes.
"""

from __future__ import annotations

import importlib.util
import multiprocessing
import os
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent

pytestmark = pytest.mark.skipif("fork" not in multiprocessing.get_all_start_methods(),
                                reason="the second process is forked")


def _runner():
    spec = importlib.util.spec_from_file_location("run_demo_under_test",
                                                  ROOT / "worked_examples" / "run_demo.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def _step(i: int, fail: bool = False, crash: bool = False):
    def step() -> None:
        print(f"out {i} pid-is-worker={os.getpid() != PARENT}")
        print(f"err {i}", file=sys.stderr)
        print(f"out {i} again")
        if crash:
            os._exit(3)
        if fail:
            sys.exit(f"demo stopped at {i}")
    return step


PARENT = os.getpid()


def test_output_in_step_order_streams_kept(capsys, monkeypatch):
    rd = _runner()
    monkeypatch.setattr(os, "cpu_count", lambda: 2)
    monkeypatch.setattr(os, "getloadavg", lambda: (0.5, 0.5, 0.5))
    rd.run_steps({i: _step(i) for i in range(1, 6)}, (1, 2, 4))
    out, err = capsys.readouterr()
    assert out.splitlines() == [
        f"out {i} pid-is-worker={i in (1, 2, 4)}" if k == 0 else f"out {i} again"
        for i in range(1, 6) for k in (0, 1)]
    assert err.splitlines() == [f"err {i}" for i in range(1, 6)]


def test_one_process_runs_in_order(capsys):
    rd = _runner()
    rd.run_steps({i: _step(i) for i in range(1, 4)}, ())
    out, _ = capsys.readouterr()
    assert "pid-is-worker=True" not in out
    assert [ln.split()[1] for ln in out.splitlines()] == ["1", "1", "2", "2", "3", "3"]


def test_failing_worker_step_stops_after_its_output(capsys, monkeypatch):
    rd = _runner()
    monkeypatch.setattr(os, "cpu_count", lambda: 2)
    monkeypatch.setattr(os, "getloadavg", lambda: (0.5, 0.5, 0.5))
    steps = {1: _step(1), 2: _step(2, fail=True), 3: _step(3), 4: _step(4)}
    with pytest.raises(SystemExit) as exc:
        rd.run_steps(steps, (2, 4))
    assert exc.value.code == "demo stopped at 2"
    out, _ = capsys.readouterr()
    assert [ln.split()[1] for ln in out.splitlines()] == ["1", "1", "2", "2"]


def test_worker_that_dies_is_reported(capsys, monkeypatch):
    rd = _runner()
    monkeypatch.setattr(os, "cpu_count", lambda: 2)
    monkeypatch.setattr(os, "getloadavg", lambda: (0.5, 0.5, 0.5))
    with pytest.raises(SystemExit) as exc:
        rd.run_steps({1: _step(1), 2: _step(2, crash=True), 3: _step(3)}, (2,))
    assert "worker process ended unexpectedly" in str(exc.value.code)


def test_no_idle_cpu_runs_in_one_process(capsys, monkeypatch):
    rd = _runner()
    monkeypatch.setattr(os, "cpu_count", lambda: 2)
    monkeypatch.setattr(os, "getloadavg", lambda: (1.5, 1.5, 1.5))   # 0.5 CPU idle
    rd.run_steps({i: _step(i) for i in range(1, 4)}, (2,))
    out, _ = capsys.readouterr()
    assert "pid-is-worker=True" not in out
    assert [ln.split()[1] for ln in out.splitlines()] == ["1", "1", "2", "2", "3", "3"]
