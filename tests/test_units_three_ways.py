"""Issue 10 "Done when": the resistor-chain worked example written three ways.

1. as shipped, coherent SI (readings in V, the resistor history in Ω, f_nom in Hz);
2. readings in µV (``unit = "µV"`` on the on/off record, every reading × 10⁶), the resistor
   history in GΩ (``value [GΩ]``, ``expanded_uncertainty [GΩ]``, every number × 10⁻⁹) and the
   current shown in pA (``[units] I = "pA"``);
3. the drive frequency stated in MHz (``nominal_frequency = {value = 600, unit = "MHz"}``).

Check values: the prefixes micro 1e-6, pico 1e-12, giga 1e9, mega 1e6 (SI Brochure 9th ed.,
Table 7); the numbers are rewritten with exact decimal arithmetic, so the three budgets are one
budget and its values must agree in SI to 1 part in 10¹² (float rounding of the rewritten
decimals is ~1e-16; see the test for u). pint is the reference library behind the conversions (tests/test_units.py).
"""

from __future__ import annotations

import shutil
from decimal import Decimal
from pathlib import Path

import pytest
from numeric import near

from budget import evaluate
from budget.spec import load_spec

ROOT = Path(__file__).resolve().parents[1]


def _scale_columns(path: Path, columns: dict[str, tuple[str, int]]) -> None:
    """Rewrite the named CSV columns: new header text and every number × 10^power (decimal)."""
    lines = path.read_text().splitlines()
    head = next(i for i, ln in enumerate(lines) if ln and not ln.startswith("#"))
    names = lines[head].split(",")
    idx = {names.index(c): (new, p) for c, (new, p) in columns.items()}
    out = lines[:head] + [",".join(idx[i][0] if i in idx else n for i, n in enumerate(names))]
    for ln in lines[head + 1:]:
        cells = ln.split(",")
        for i, (_, p) in idx.items():
            cells[i] = format(Decimal(cells[i]).scaleb(p), "f")
        out.append(",".join(cells))
    path.write_text("\n".join(out) + "\n")


@pytest.fixture(scope="module")
def three(tmp_path_factory):
    base = tmp_path_factory.mktemp("three")
    specs = []
    for way in ("si", "micro", "mega"):
        d = base / way
        shutil.copytree(ROOT / "worked_examples" / "resistor_chain", d)
        spec = d / "spec.toml"
        text = spec.read_text()
        if way == "micro":
            _scale_columns(d / "data" / "onoff_10h.csv", {"reading": ("reading", 6)})
            _scale_columns(d / "data" / "r1g_history.csv",
                           {"value": ("value [GΩ]", -9),
                            "expanded_uncertainty": ("expanded_uncertainty [GΩ]", -9)})
            text = text.replace('file = "data/onoff_10h.csv"\nunit = "V"',
                                'file = "data/onoff_10h.csv"\nunit = "µV"')
            text = text.replace("[monte_carlo]", '[units]\nI = "pA"\n\n[monte_carlo]')
        if way == "mega":
            text = text.replace("nominal_Hz = 600.0e6",
                                'nominal_frequency = {value = 600, unit = "MHz"}')
        assert text != spec.read_text() or way == "si"
        spec.write_text(text)
        specs.append(evaluate(load_spec(spec), monte_carlo_enabled=False))
    return specs


def test_three_spellings_give_the_same_si_values(three):
    a, b, c = three
    to_si = {"A": 1.0, "pA": 1e-12, "µA/A": 1.0}   # delta_I: µA/A in all three ways
    for name in ("I", "delta_I"):
        ma, mb, mc = (x.measurand(name) for x in (a, b, c))
        for m in (mb, mc):
            f = to_si[m.unit]
            # 1 part in 10¹² of I: rel 1e-12 for I; for the deviation (ppm) that is 1e-6 ppm
            # absolute (a float ulp of I/(n·e·f) is 1.1e-16, i.e. 1.1e-10 ppm)
            assert m.value * f == near(ma.value, rel=1e-12, abs=1e-6 if name == "delta_I" else 0)
            # u comes from the scatter of 36 000 readings: each decimal reading rounds to the
            # nearest double on its own (≤ 1.1e-16 of 0.096 V, in V or in µV), about 1e-11 of
            # the per-reading noise, so u agrees to ~1e-12 and not to the last bit; 1e-10 bounds
            # it. The quoted U (two significant digits, JCGM 100 §7.2.6) is identical.
            assert m.standard_uncertainty * f == near(ma.standard_uncertainty, rel=1e-10)
            assert m.expanded_uncertainty * f == near(ma.expanded_uncertainty, rel=1e-10)
            assert f"{m.expanded_uncertainty * f:.2g}" == f"{ma.expanded_uncertainty:.2g}"
            assert m.coverage_factor == ma.coverage_factor
    # the input rows are in coherent SI whatever the files said
    for qa, qb, qc in zip(a.inputs, b.inputs, c.inputs):
        assert qa.name == qb.name == qc.name and qa.unit == qb.unit == qc.unit
        assert qb.value == near(qa.value, rel=1e-12, abs=1e-12 * qa.standard_uncertainty)
        assert qc.value == near(qa.value, rel=1e-12, abs=1e-12 * qa.standard_uncertainty)


def test_each_spelling_shows_its_own_units(three):
    a, b, c = three
    assert (a.measurand("I").unit, b.measurand("I").unit, c.measurand("I").unit) == \
        ("A", "pA", "A")
    # 96.1 pA (n·e·f at 600 MHz, e exact, SI 2019) shown as about 96.1 in pA
    assert 96.0 < b.measurand("I").value < 96.2
    notes = " ".join(n for q in b.inputs for n in q.provenance.notes)
    assert "stated in GΩ" in notes and "readings in µV" in notes


def test_three_spellings_give_the_same_record_numbers(three):
    # the JSON record stores coherent SI plus display_unit: the records agree number by number
    recs = [b.to_dict()["measurands"] for b in three]
    for ma, mb, mc in zip(*recs):
        assert ma["unit"] == mb["unit"] == mc["unit"]
        assert mb.get("display_unit") == ("pA" if ma["name"] == "I" else "µA/A")
        for m in (mb, mc):
            absolute = 1e-12 if ma["unit"] == "1" else 0.0   # 1e-12 of I (dimensionless)
            assert m["value"] == near(ma["value"], rel=1e-12, abs=absolute)
            assert m["expanded_uncertainty"] == near(ma["expanded_uncertainty"], rel=1e-10)
