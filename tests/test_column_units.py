"""Units in CSV headers (budget/inputs/column_units.py) in the history and table modules.

Check values: SI prefixes from SI Brochure 9th ed. (2019) Table 7 (giga 1e9, mega 1e6, milli
1e-3, micro 1e-6); pint as the reference library for parsing; °C is an offset scale
(t/°C = T/K − 273.15, SI Brochure 9th ed. §2.3.1). Synthetic truth: one invented history written
in two units must give the same prediction, since only the unit's factor differs.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from numeric import near

from budget.errors import DataError, SpecError
from budget.inputs import InputContext, run_module
from budget.inputs.column_units import ColumnUnit, resolve_units, split_header
from budget.inputs.tables import read_table

START = pd.Timestamp("2023-01-15")
AT = "2026-02-01T14:00"
R0 = 1.0e9        # Ω, invented 1 GΩ standard
U = 0.05e-6 * R0  # Ω, invented standard uncertainty of each calibration


def history(folder: Path, *, factor: float = 1.0, value_head="value",
            u_head="expanded_uncertainty", name="hist.csv", extra=("", lambda i: "")) -> None:
    """An invented history (drift 0.12e-6 per year, seeded scatter), numbers divided by
    ``factor`` so that a header unit of that factor states the same resistances."""
    rng = np.random.default_rng(7)
    lines = [f"date,{value_head},{u_head},coverage_factor{extra[0]}"]
    for i in range(10):
        d = START + pd.Timedelta(days=91 * i)
        v = R0 * (1 + 0.12e-6 * (d - START).days / 365.25) + rng.normal(0, U)
        lines.append(f"{d.date().isoformat()},{v / factor!r},{2 * U / factor!r},2{extra[1](i)}")
    (folder / name).write_text("\n".join(lines) + "\n", encoding="utf-8")


def ctx(folder, module="resistor", **table):
    return InputContext(name="R", table={"module": module, "file": "hist.csv", "at": AT,
                                         **table}, folder=Path(folder), spec_file="spec.toml")


def only(r):
    assert len(r.quantities) == 1
    return r.quantities[0]


def test_split_header_takes_the_unit_out_of_the_name():
    names, units = split_header(["date", "value [GΩ]", " expanded_uncertainty [MΩ] "])
    assert names == ["date", "value", "expanded_uncertainty"]
    assert units == {"value": "GΩ", "expanded_uncertainty": "MΩ"}


@pytest.mark.parametrize("head, factor", [
    ("GΩ", 1e9), ("Gohm", 1e9), ("MΩ", 1e6), ("kohm", 1e3), ("Ω", 1.0),   # Table 7 prefixes
])
def test_resistor_history_in_prefixed_units_gives_the_si_prediction(tmp_path, head, factor):
    # synthetic truth: the same resistances stated in another unit (only the factor differs)
    si = tmp_path / "si"
    pre = tmp_path / "pre"
    si.mkdir()
    pre.mkdir()
    history(si)
    history(pre, factor=factor, value_head=f"value [{head}]")
    a, b = only(run_module(ctx(si))), only(run_module(ctx(pre)))
    assert b.unit == "Ω"
    assert b.value == near(a.value, rel=1e-12)
    assert b.standard_uncertainty == near(a.standard_uncertainty, rel=1e-9)
    if factor != 1.0:
        assert any(f"stated in {head}" in n for n in b.provenance.notes)


def test_uncertainty_column_may_state_its_own_unit(tmp_path):
    # value in GΩ, U in Ω (its header): the same history as all-SI (SI Brochure Table 7)
    (tmp_path / "a").mkdir()
    history(tmp_path / "a")
    history(tmp_path, factor=1e9, value_head="value [GΩ]")
    text = (tmp_path / "hist.csv").read_text().splitlines()
    rows = [text[0].replace("expanded_uncertainty", "expanded_uncertainty [Ω]")]
    for ln in text[1:]:
        d, v, u, k = ln.split(",")
        rows.append(f"{d},{v},{float(u) * 1e9!r},{k}")
    (tmp_path / "hist.csv").write_text("\n".join(rows) + "\n")
    a, b = only(run_module(ctx(tmp_path / "a"))), only(run_module(ctx(tmp_path)))
    assert b.value == near(a.value, rel=1e-12)
    assert b.standard_uncertainty == near(a.standard_uncertainty, rel=1e-9)


def test_common_uncertainty_is_in_the_headers_unit(tmp_path):
    (tmp_path / "si").mkdir()
    history(tmp_path / "si")
    history(tmp_path, factor=1e9, value_head="value [GΩ]")
    uc = 0.5 * U                 # Ω, invented common part
    a = run_module(ctx(tmp_path / "si", common_standard_uncertainty=uc))
    b = run_module(ctx(tmp_path, common_standard_uncertainty=uc / 1e9))   # in GΩ
    qa = {q.name: q for q in a.quantities}
    qb = {q.name: q for q in b.quantities}
    assert set(qa) == set(qb) == {"R_cal", "R_common"}
    for n in qa:
        assert qb[n].value == near(qa[n].value, rel=1e-12, abs=1e-20)
        assert qb[n].standard_uncertainty == near(qa[n].standard_uncertainty, rel=1e-9)


@pytest.mark.parametrize("head, words", [
    ("value [mV]", ["field 'value'", "[mV] is V", "a resistance"]),
    ("value [GΩx]", ["field 'value'", "cannot read the unit", "GΩx"]),
    ("value [uohm/s]", ["field 'value'", "a resistance"]),
])
def test_wrong_or_unreadable_header_unit_is_refused(tmp_path, head, words):
    history(tmp_path, value_head=head)
    with pytest.raises(DataError) as info:
        run_module(ctx(tmp_path))
    line = info.value.one_line()
    assert "hist.csv: field" in line
    for w in words:
        assert w in line, line


def test_unit_on_the_coverage_factor_is_refused(tmp_path):
    history(tmp_path)
    p = tmp_path / "hist.csv"
    p.write_text(p.read_text().replace("coverage_factor", "coverage_factor [V]", 1))
    with pytest.raises(DataError, match="field 'coverage_factor'.*takes no unit"):
        try:
            run_module(ctx(tmp_path))
        except DataError as exc:
            raise DataError(exc.one_line()) from None


def test_amplifier_unit_key_converts_and_checks_dimension(tmp_path):
    # transresistance history in MΩ via the key (SI Brochure Table 7: mega = 1e6)
    (tmp_path / "si").mkdir()
    history(tmp_path / "si")
    history(tmp_path, factor=1e6)
    a = only(run_module(ctx(tmp_path / "si", module="amplifier")))
    b = only(run_module(ctx(tmp_path, module="amplifier", unit="MΩ")))
    assert b.unit == "Ω" and b.value == near(a.value, rel=1e-12)
    with pytest.raises(SpecError, match=r"'mA' is A .* but a transresistance is Ω"):
        run_module(ctx(tmp_path, module="amplifier", unit="mA"))
    with pytest.raises(SpecError, match="but a gain is dimensionless"):
        run_module(ctx(tmp_path, module="amplifier", unit="MΩ", quantity="gain"))
    # key and header disagreeing: refused rather than one of them ignored
    history(tmp_path, factor=1e9, value_head="value [GΩ]")
    with pytest.raises(SpecError, match="state the unit once"):
        run_module(ctx(tmp_path, module="amplifier", unit="MΩ"))


def test_offset_scale_refused_where_a_difference_is_required():
    # °C is an offset scale (SI Brochure §2.3.1): an uncertainty in °C is not convertible by
    # x·scale + offset; the column holds differences
    rule = {"u": ColumnUnit("K", "a temperature difference", difference=True),
            "t": ColumnUnit("K", "a temperature")}
    with pytest.raises(DataError, match="offset scale"):
        resolve_units({"u": "°C"}, rule, shown="f.csv")
    got = resolve_units({"t": "°C", "u": "mK"}, rule, shown="f.csv")
    assert got["t"].offset == 273.15 and got["u"].scale == 1e-3


def test_unit_on_a_count_is_refused(tmp_path):
    # n_mean (electrons per cycle in a pump plateau table) is a count
    p = tmp_path / "plateau.csv"
    p.write_text("gate_voltage,n_mean [A]\n-0.5,1.0\n")
    with pytest.raises(DataError) as info:
        read_table(p, ["gate_voltage", "n_mean"], ["n_std"], shown="plateau.csv")
    assert info.value.field == "n_mean" and "takes no unit" in info.value.message


def test_voltmeter_table_readings_in_millivolt(tmp_path):
    # g from a table in V and the same table with readings in mV (milli = 1e-3, Table 7)
    ref = np.array([-10.0, -5.0, 0.0, 5.0, 10.0])
    rng = np.random.default_rng(3)
    rd = ref * (1 + 3e-7) + rng.normal(0, 1e-7, ref.size)
    rows_v = [f"{float(a)!r},{float(b)!r}" for a, b in zip(ref, rd)]
    rows_mv = [f"{float(a)!r},{float(b) * 1e3!r}" for a, b in zip(ref, rd)]
    (tmp_path / "a.csv").write_text("reference_V,reading_V\n" + "\n".join(rows_v) + "\n")
    (tmp_path / "b.csv").write_text("reference_V,reading_V [mV]\n" + "\n".join(rows_mv) + "\n")

    def g(name):
        c = InputContext(name="g", table={"module": "voltmeter", "file": name,
                                          "working_voltage_V": 10.0},
                         folder=tmp_path, spec_file="spec.toml")
        return {q.name: q for q in run_module(c).quantities}["g_cal"]

    a, b = g("a.csv"), g("b.csv")
    assert b.value == near(a.value, rel=1e-12)
    assert b.standard_uncertainty == near(a.standard_uncertainty, rel=1e-6)
    (tmp_path / "c.csv").write_text("reference_V [A],reading_V\n" + "\n".join(rows_v) + "\n")
    with pytest.raises(DataError, match="a voltage"):
        g("c.csv")


def test_frequency_comparison_in_parts_in_ten_to_the_twelve(tmp_path):
    # fractional offsets in 10⁻¹² (a power-of-ten scale of a dimensionless quantity)
    lines_si = ["date,fractional_offset,uncertainty"]
    lines_12 = ["date,fractional_offset [10⁻¹²],uncertainty"]
    for i, y in enumerate([1.2, 0.8, 1.1, 0.9]):
        d = (START + pd.Timedelta(days=30 * i)).date().isoformat()
        lines_si.append(f"{d},{y * 1e-12!r},{2e-13!r}")
        lines_12.append(f"{d},{y},0.2")
    (tmp_path / "a.csv").write_text("\n".join(lines_si) + "\n")
    (tmp_path / "b.csv").write_text("\n".join(lines_12) + "\n")

    def f(name):
        c = InputContext(name="f", table={"module": "frequency", "file": name, "at": "2023-06-01",
                                          "nominal_Hz": 600e6}, folder=tmp_path,
                         spec_file="spec.toml")
        return only(run_module(c))

    a, b = f("a.csv"), f("b.csv")
    assert b.value == near(a.value, rel=1e-15)
    assert b.standard_uncertainty == near(a.standard_uncertainty, rel=1e-9)
    (tmp_path / "c.csv").write_text("\n".join(lines_12).replace("[10⁻¹²]", "[Hz]") + "\n")
    with pytest.raises(DataError, match="fractional frequency offset"):
        f("c.csv")


def test_frequency_nominal_with_its_unit(tmp_path):
    # 600 MHz = 6e8 Hz (mega = 1e6, SI Brochure Table 7)
    def f(**t):
        c = InputContext(name="f", table={"module": "frequency", "offset_bound": 1e-11, **t},
                         folder=tmp_path, spec_file="spec.toml")
        return only(run_module(c))

    assert f(nominal_frequency={"value": 600, "unit": "MHz"}).value == 6e8
    with pytest.raises(SpecError, match="not a frequency"):
        f(nominal_frequency={"value": 600, "unit": "mV"})
    with pytest.raises(SpecError, match="not both"):
        f(nominal_frequency={"value": 600, "unit": "MHz"}, nominal_Hz=6e8)
