"""Issue 17 class 1: the resistor's voltage-coefficient correction γ·(V_work − V_cal) for
absurd magnitudes is a located one-line error (exit 2), never an inf passed on.

The limit is the largest IEEE 754 binary64 number, about 1.797e308 (IEEE 754-2019 §3.6) —
common practice; 1e308 · 3.4e308 overflows it. The spec is the invented worked example
worked_examples/resistor_chain with two keys changed.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from budget.cli import main

EXAMPLE = Path(__file__).resolve().parents[1] / "worked_examples" / "resistor_chain"


def _spec(tmp_path, **keys) -> Path:
    s = (EXAMPLE / "spec.toml").read_text(encoding="utf-8")
    for k, v in keys.items():
        s, n = re.subn(rf"(?m)^{k}\s*=.*$", f"{k} = {v}", s)
        assert n == 1, k
    s = s.replace('file = "data/', f'file = "{(EXAMPLE / "data").as_posix()}/')
    p = tmp_path / "spec.toml"
    p.write_text(s, encoding="utf-8")
    return p


@pytest.mark.parametrize("keys", [
    {"voltage_coefficient": "1e308", "calibration_voltage_V": "-1.7e308"},
    {"voltage_coefficient_uncertainty": "1e300", "calibration_voltage_V": "1e300"},
])
def test_voltage_coefficient_overflow_is_located(tmp_path, capsys, keys):
    code = main(["run", str(_spec(tmp_path, **keys)), "--no-monte-carlo"])
    err = capsys.readouterr().err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert code == 2 and len(lines) == 1, err
    assert "inputs.R.working_voltage_V" in lines[0] and "voltage-coefficient" in lines[0]
    assert "spec.toml:" in lines[0]
