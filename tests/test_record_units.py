"""Records store coherent SI values plus the display unit; compare converts between units.

Check values: pico = 1e-12, nano = 1e-9 (SI Brochure 9th ed., Table 7); Ohm's law for the
invented typed-in budget (96.1 mV over 1 GΩ is 96.1 pA). pint is the reference behind the
unit factors (tests/test_units.py). Invented numbers throughout.
"""

from __future__ import annotations

import json
import subprocess
import sys

import pytest
from numeric import near

from budget import evaluate, parse_spec
from budget.compare import compare_runs
from budget.errors import DataError
from budget.record import record_from_text

SPEC = """
[budget]
title = "record units (invented)"
[model]
I = "V_on / R"
{units}
[monte_carlo]
trials = 2000
seed = 11
sampling = "random"
[inputs.V_on]
value = 0.0961
standard_uncertainty = 2e-8
unit = "V"
[inputs.R]
value = 1.0e9
standard_uncertainty = 50.0
unit = "Ω"
"""


def run(units: str = "") -> str:
    return evaluate(parse_spec(SPEC.format(units=units))).to_json()


@pytest.fixture(scope="module")
def texts():
    return {"A": run(), "pA": run('[units]\nI = "pA"'), "nA": run('[units]\nI = "nA"')}


def test_record_holds_si_values_and_the_display_unit(texts):
    si, pa = json.loads(texts["A"]), json.loads(texts["pA"])
    a, b = si["measurands"][0], pa["measurands"][0]
    assert "display_unit" not in a and a["unit"] == "A"          # coherent SI: as before
    assert b["unit"] == "A" and b["display_unit"] == "pA"
    for k in ("value", "standard_uncertainty", "expanded_uncertainty"):
        assert b[k] == near(a[k], rel=1e-12), k
    for ta, tb in zip(a["terms"], b["terms"]):
        assert tb["sensitivity"] == near(ta["sensitivity"], rel=1e-12)
        assert tb["contribution"] == near(ta["contribution"], rel=1e-12)
    ma, mb = si["monte_carlo"][0], pa["monte_carlo"][0]
    assert mb["unit"] == "A" and mb["display_unit"] == "pA"
    for k in ("value", "standard_uncertainty", "interval_low", "interval_high"):
        assert mb[k] == near(ma[k], rel=1e-9), k     # same seed; factor rounding only


def test_reading_shows_the_display_unit_and_writes_back_the_same_bytes(texts):
    b = record_from_text(texts["pA"])
    m = b.measurand("I")
    assert m.unit == "pA" and m.value == near(96.1, rel=1e-12)   # Ohm's law, in pA
    assert b.mc("I").value == near(96.1, rel=1e-6)
    assert b.to_json() == texts["pA"]               # digests of read records stay the same


def test_old_record_without_display_unit_is_read_as_it_stands(texts):
    # records written before held display-unit numbers under "unit": still read unchanged
    old = json.loads(texts["A"])
    m = old["measurands"][0]
    m["unit"] = "pA"
    for k in ("value", "standard_uncertainty", "expanded_uncertainty"):
        m[k] *= 1e12
    b = record_from_text(json.dumps(old))
    assert b.measurand("I").unit == "pA" and b.measurand("I").value == near(96.1, rel=1e-12)


@pytest.mark.parametrize("shown", ["mV", "pAx", 3])
def test_a_display_unit_that_does_not_fit_is_refused(texts, shown):
    rec = json.loads(texts["pA"])
    rec["measurands"][0]["display_unit"] = shown
    with pytest.raises(DataError):
        record_from_text(json.dumps(rec), file="rec.json")


def test_compare_converts_records_in_other_units(texts):
    recs = [record_from_text(texts[u]) for u in ("A", "pA", "nA")]
    c = compare_runs(recs, en_basis="2u")
    assert c.unit == "A"
    x = [r.value for r in c.runs]
    assert x[1] == near(x[0], rel=1e-12) and x[2] == near(x[0], rel=1e-12)
    assert any("converted to A" in n for n in c.notes)
    c2 = compare_runs(recs[1:], en_basis="2u")
    assert c2.unit == "pA" and c2.runs[1].value == near(96.1, rel=1e-12)


def test_compare_refuses_another_dimension(texts, tmp_path):
    volt = json.loads(texts["A"])
    volt["measurands"][0]["unit"] = "V"
    with pytest.raises(DataError, match="different dimensions"):
        compare_runs([record_from_text(texts["A"]), record_from_text(json.dumps(volt))])
    (tmp_path / "a.json").write_text(texts["pA"])
    (tmp_path / "b.json").write_text(json.dumps(volt))
    r = subprocess.run([sys.executable, "-m", "budget", "compare", str(tmp_path / "a.json"),
                        str(tmp_path / "b.json")], capture_output=True, text=True, timeout=120)
    assert r.returncode == 2
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "b.json" in lines[0] and "dimension" in lines[0], r.stderr


def test_relative_deviation_scaled_once():
    # x = 1 + 2e-7 by construction: x − 1 shown in µA/A is 0.2 (µA/A = 1e-6, SI Brochure
    # Table 7 prefixes); written 1e6·(x − 1) with the same display unit it is refused
    from budget.errors import SpecError
    text = ('[model]\nd = "{e}"\n[units]\nd = "µA/A"\n[monte_carlo]\nenabled = false\n'
            "[inputs.x]\nvalue = 1.0000002\nstandard_uncertainty = 1e-7\n")
    m = evaluate(parse_spec(text.format(e="x - 1")), monte_carlo_enabled=False).measurand("d")
    assert m.unit == "µA/A" and m.value == near(0.2, rel=1e-8)
    with pytest.raises(SpecError, match="multiplies by 1e"):
        evaluate(parse_spec(text.format(e="1e6 * (x - 1)")), monte_carlo_enabled=False)
