"""Start-up cost (issue "Digits per second", item 3; a project convention, no external source):
the commands that do no numerics import neither numpy nor scipy (nor pandas or matplotlib),
checked in a fresh interpreter by listing ``sys.modules`` after the command ran.

Timing is not asserted here (benchmarks/ measures it); the imported set is what decides it.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
HEAVY = ("numpy", "scipy", "pandas", "matplotlib", "weasyprint", "uncertainties")

_PROBE = """
import json, sys
from budget.cli import main
try:
    code = main(sys.argv[1:])
except SystemExit as exc:
    code = exc.code
heavy = sorted({m.split('.')[0] for m in sys.modules} & set(json.loads(%r)))
sys.stderr.write("\\nHEAVY " + json.dumps(heavy) + "\\n")
sys.exit(code or 0)
"""


def _heavy_after(args: list[str], cwd: Path, env_extra: dict | None = None) -> list[str]:
    env = {**os.environ, "PYTHONPATH": str(ROOT), **(env_extra or {})}
    proc = subprocess.run([sys.executable, "-c", _PROBE % json.dumps(HEAVY), *args], cwd=cwd,
                          env=env, capture_output=True, text=True, timeout=120)
    line = [ln for ln in proc.stderr.splitlines() if ln.startswith("HEAVY ")]
    assert line, proc.stderr
    return json.loads(line[-1][6:])


@pytest.mark.parametrize("args", [["--help"], ["--version"], ["identity", "--help"],
                                  ["sign", "--help"], ["verify", "--help"], ["run", "--help"],
                                  ["report", "--help"], ["compare", "--help"]])
def test_help_imports_no_numerics(args, tmp_path):
    assert _heavy_after(args, tmp_path) == []


def test_identity_create_imports_no_numerics(tmp_path):
    heavy = _heavy_after(["identity", "create", "--name", "A. Tester (invented)", "--out",
                          str(tmp_path / "id")], tmp_path,
                         {"BUDGET_PASSPHRASE": "invented passphrase 4711"})
    assert (tmp_path / "id" / "identity.p12").is_file()
    assert heavy == []


def test_import_budget_is_light(tmp_path):
    code = ("import sys, budget; print(sorted({m.split('.')[0] for m in sys.modules} & "
            f"set({list(HEAVY)!r})))")
    out = subprocess.run([sys.executable, "-c", code], cwd=tmp_path, capture_output=True,
                         text=True, env={**os.environ, "PYTHONPATH": str(ROOT)}, timeout=60)
    assert out.stdout.strip() == "[]"
    # and the lazy public names still resolve to the real objects
    code = "import budget, budget.engine; assert budget.evaluate is budget.engine.evaluate"
    subprocess.run([sys.executable, "-c", code], cwd=tmp_path, check=True, timeout=60,
                   env={**os.environ, "PYTHONPATH": str(ROOT)})


def test_compare_needs_no_scipy_stats(tmp_path):
    # scipy.stats costs most of a second to import; the χ² and F tails come from scipy.special
    code = ("import sys, budget.compare, budget.logbook.gls, budget.stats.regression, "
            "budget.stats.typea, budget.cli.explain; print('scipy.stats' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], cwd=tmp_path, capture_output=True,
                         text=True, env={**os.environ, "PYTHONPATH": str(ROOT)}, timeout=60)
    assert out.stdout.strip() == "False", out.stderr
