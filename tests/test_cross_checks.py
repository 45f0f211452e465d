"""Cross-checks: the spec's n against a pump input's plateau (budget/cross_checks.py), and a
pump column that is constant or alternates faster than the settling can be seen or cut
(budget/inputs/cycles.py, cycles_settle.py).

The worked example worked_examples/pump_characterisation (invented data, plateau 1, n = 1) is
copied and its constant n changed: the model I = n·e·f·(1 + δ) then multiplies a pump error
characterised on plateau 1 by two electrons per cycle — the quantized-current relation
I = n·e·f holds per plateau (shared/DOMAIN.md, common practice), so the result has no meaning
and the warning is an error that ``budget sign`` refuses without ``--accept-warnings``.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pytest
from test_settling import chain, run, write

from budget.engine import evaluate
from budget.spec import load_spec

EXAMPLE = Path(__file__).resolve().parents[1] / "worked_examples" / "pump_characterisation"


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    d = tmp_path_factory.mktemp("pump")
    for name in ("spec.toml", "plateau_scan.csv", "thermal_rates.csv"):
        shutil.copy(EXAMPLE / name, d / name)
    return d


def budget_with_n(folder: Path, n: int):
    text = (EXAMPLE / "spec.toml").read_text(encoding="utf-8")
    assert "\nn = 1\n" in text
    spec = folder / f"spec_n{n}.toml"
    spec.write_text(text.replace("\nn = 1\n", f"\nn = {n}\n"), encoding="utf-8")
    return evaluate(load_spec(spec), monte_carlo_enabled=False)


def test_n_equal_to_the_plateau_is_quiet(folder):
    b = budget_with_n(folder, 1)
    assert not [w for w in b.warnings if w.code == "pump.plateau_mismatch"]


def test_n_against_another_plateau_is_an_error_warning(folder):
    b = budget_with_n(folder, 2)
    (w,) = [w for w in b.warnings if w.code == "pump.plateau_mismatch"]
    assert w.severity == "error" and w.input == "delta_pump"
    assert "plateau/n mismatch" in w.message and "plateau 1" in w.message and "n = 2" in w.message


# ------------------------------------------------------------------ the pump column
def test_pump_alternating_faster_than_the_fit_can_see_warns(tmp_path, capsys):
    # 3 s segments read every 1 s: the step response has 3 lags, fewer than the 5 the
    # single-exponential fit needs (three parameters A, τ, c and two degrees of freedom for its
    # χ² check: project convention, settling.MIN_LAGS); the invented chain of
    # tests/test_settling.py with τ = 0.01 s
    t, y, on = chain(np.random.default_rng(5), 300, seg=3.0, tau=0.01, white=1e-5)
    rc, rec, err = run(write(tmp_path, t, y, on), capsys)
    assert rc == 0
    (w,) = [w for w in rec["warnings"] if w["code"] == "cycles.fast_switching"]
    assert w["severity"] == "warning" and "alternates every 3 s" in w["message"]
    assert "[cycles.fast_switching]" in err
    # the same chain with 20 s segments (20 lags) is quiet
    t, y, on = chain(np.random.default_rng(5), 60, seg=20.0, tau=0.01, white=1e-5)
    rc, rec, err = run(write(tmp_path, t, y, on), capsys)
    assert rc == 0 and "cycles.fast_switching" not in {w["code"] for w in rec["warnings"]}


def test_pump_alternating_faster_than_the_settle_time_is_refused(tmp_path, capsys):
    t, y, on = chain(np.random.default_rng(6), 100, seg=3.0, tau=0.01, white=1e-5)
    rc, rec, err = run(write(tmp_path, t, y, on, settle_s=10), capsys)
    assert rc == 2 and rec is None
    assert "alternates every 3 s, faster than the cuts" in err and err.count("\n") == 1
