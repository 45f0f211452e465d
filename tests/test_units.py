"""Units: pint as the reference library, SI Brochure 9th ed. (2019) for prefixes and constants.

Check values: SI prefixes from SI Brochure 9th ed. Table 7 (micro 1e-6, nano 1e-9, pico 1e-12,
mega 1e6, giga 1e9); defining constants from SI Brochure 9th ed. Table 1 (e, h, k exact);
°C: t/°C = T/K − 273.15 (SI Brochure 9th ed. §2.3.1); ppm = 1e-6 as pint defines it.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest
from numeric import near

from budget import evaluate, parse_spec
from budget.errors import BudgetError, ModelError, SpecError
from budget.model import BUILTIN_CONSTANTS
from budget.spec import load_spec
from budget.units import UnitError, parse_unit, registry

ROOT = Path(__file__).resolve().parents[1]


# --------------------------------------------------------------------------- the registry
@pytest.mark.parametrize("name, builtin, unit", [
    ("elementary_charge", "e", "C"),       # 1.602176634e-19 C, SI Brochure 9th ed. Table 1
    ("planck_constant", "h", "J s"),       # 6.62607015e-34 J s, same table
    ("boltzmann_constant", "k_B", "J/K"),  # 1.380649e-23 J/K, same table
])
def test_registry_constants_are_the_builtin_si_2019_values(name, builtin, unit):
    q = registry().Quantity(1.0, name).to(unit.replace(" ", "*")).magnitude
    assert q == near(BUILTIN_CONSTANTS[builtin], rel=1e-15)


@pytest.mark.parametrize("text, scale, si", [
    ("µV", 1e-6, "V"), ("uV", 1e-6, "V"), ("μV", 1e-6, "V"),    # micro (SI Brochure Table 7)
    ("nA", 1e-9, "A"), ("pA", 1e-12, "A"),                       # nano, pico
    ("GΩ", 1e9, "Ω"), ("Gohm", 1e9, "Ω"), ("MHz", 1e6, "Hz"),    # giga, mega
    ("K", 1.0, "K"), ("1", 1.0, "1"), ("", 1.0, "1"),
    ("ppm", 1e-6, "1"), ("µA/A", 1e-6, "1"), ("nA/A", 1e-9, "1"),
    ("10⁻⁶", 1e-6, "1"), ("×10⁻⁸", 1e-8, "1"), ("1e-9", 1e-9, "1"),
])
def test_spellings_resolve_to_exact_si_factors(text, scale, si):
    u = parse_unit(text)
    assert u.scale == scale and u.si == si and u.offset == 0.0   # powers of ten exactly


def test_celsius_is_an_offset_scale():
    # T/K = t/°C + 273.15 (SI Brochure 9th ed. §2.3.1); a difference of 1 °C is 1 K
    u = parse_unit("°C")
    assert (u.scale, u.offset, u.si) == (1.0, 273.15, "K")
    assert parse_unit("degC") == parse_unit("degC")


def test_unknown_unit_says_did_you_mean():
    with pytest.raises(UnitError, match=r"unknown unit 'uv' \(did you mean µV or uV"):
        parse_unit("uv")


@pytest.mark.parametrize("typo", ["µVolt", "uVv", "µOhms", "µµV", "uXYZ"])
def test_micro_typos_get_one_line_not_a_recursion(typo):
    # a typo starting with µ or u once made the did-you-mean try the typo itself, which asked
    # for suggestions again, until Python's recursion limit (found by a review with invented
    # data); the message must be the usual one line
    with pytest.raises(UnitError, match=rf"^unknown unit '{typo}' \(") as info:
        parse_unit(typo)
    assert "\n" not in str(info.value)


# --------------------------------------------------------------------------- typed-in inputs
SPEC = """
[budget]
title = "units"

[model]
I = "V_on / R"

{units}

[monte_carlo]
enabled = false

[inputs.V_on]
value = {v}
standard_uncertainty = {uv}
{vunit}

[inputs.R]
value = {r}
standard_uncertainty = {ur}
{runit}
"""


def run(**kw) -> object:
    base = dict(units="", vunit="", runit="")
    return evaluate(parse_spec(SPEC.format(**{**base, **kw})), monte_carlo_enabled=False)


def test_readings_in_microvolt_and_gigaohm_give_the_si_result():
    # 96.1 mV over 1 GΩ = 96.1 pA, in three spellings of the same numbers (derivation: Ohm's law)
    si = run(v=0.0961, uv=2e-8, vunit='unit = "V"', r=1.0e9, ur=1.0, runit='unit = "Ω"')
    mixed = run(v=96100.0, uv=0.02, vunit='unit = "µV"', r=1.0, ur=1e-9, runit='unit = "GΩ"')
    a, b = si.measurand("I"), mixed.measurand("I")
    assert b.value == near(a.value, rel=1e-12)
    assert b.standard_uncertainty == near(a.standard_uncertainty, rel=1e-12)
    assert b.expanded_uncertainty == near(a.expanded_uncertainty, rel=1e-12)
    assert a.unit == b.unit == "A"
    assert mixed.inputs[0].unit == "V" and mixed.inputs[1].unit == "Ω"


def test_display_unit_converts_every_number():
    # issue 10: [units] I = "pA" printed the SI number with the label pA (10¹² wrong)
    si = run(v=0.0961, uv=2e-8, vunit='unit = "V"', r=1.0e9, ur=1.0, runit='unit = "Ω"')
    pa = run(v=0.0961, uv=2e-8, vunit='unit = "V"', r=1.0e9, ur=1.0, runit='unit = "Ω"',
             units='[units]\nI = "pA"')
    a, b = si.measurand("I"), pa.measurand("I")
    assert b.unit == "pA"
    assert b.value == near(a.value * 1e12, rel=1e-14)          # 1 A = 10¹² pA (Table 7)
    assert b.value == near(96.1, rel=1e-12)
    assert b.expanded_uncertainty == near(a.expanded_uncertainty * 1e12, rel=1e-12)
    for ta, tb in zip(a.terms, b.terms):
        assert tb.contribution == near(ta.contribution * 1e12, rel=1e-12)


def test_celsius_input_converts_value_not_uncertainty():
    spec = parse_spec(textwrap.dedent("""
        [model]
        T2 = "T"
        [monte_carlo]
        enabled = false
        [inputs.T]
        value = 23.04
        standard_uncertainty = 0.01
        unit = "°C"
        """))
    m = evaluate(spec, monte_carlo_enabled=False).measurand("T2")
    assert m.unit == "K"
    assert m.value == near(296.19, rel=1e-15)                   # 23.04 + 273.15 (§2.3.1)
    assert m.standard_uncertainty == near(0.01, rel=1e-12)      # a difference: 1 °C = 1 K


def test_unknown_unit_is_a_located_spec_error():
    with pytest.raises(SpecError, match=r"inputs\.V_on\.unit.*did you mean µV or uV"):
        run(v=1.0, uv=0.1, vunit='unit = "uv"', r=1.0, ur=0.1)


# --------------------------------------------------------------------------- dimension check
def model_spec(expr: str, extra: str = "") -> str:
    return textwrap.dedent(f"""
        [model]
        Y = "{expr}"
        {extra}
        [monte_carlo]
        enabled = false
        [inputs.I]
        value = 1.0e-10
        standard_uncertainty = 1e-16
        unit = "A"
        [inputs.V]
        value = 0.1
        standard_uncertainty = 1e-8
        unit = "V"
        """)


@pytest.mark.parametrize("expr, words", [
    ("I + V", ["'I + V'", "A (I) + V"]),
    ("exp(V)", ["'exp(V)'", "dimensionless argument", "V ("]),
    ("V ** I", ["exponent must be dimensionless"]),
])
def test_dimension_mismatch_is_refused_naming_both(expr, words):
    with pytest.raises(ModelError) as info:
        evaluate(parse_spec(model_spec(expr)), monte_carlo_enabled=False)
    line = info.value.one_line()
    assert "model.Y" in line
    for w in words:
        assert w in line


def test_model_dimensions_pass_and_give_the_si_unit():
    b = evaluate(parse_spec(model_spec("V / I")), monte_carlo_enabled=False)
    assert b.measurand("Y").unit == "Ω"                 # V/A = Ω (SI Brochure Table 4)


def test_display_unit_of_wrong_dimension_is_refused():
    with pytest.raises(SpecError, match=r"units\.Y.*'mV' is V .* but Y is A"):
        evaluate(parse_spec(model_spec("I", '[units]\nY = "mV"')), monte_carlo_enabled=False)


def test_constants_with_units_and_the_builtin_e():
    # I = n·e·f at f = 600 MHz: 96.1305... pA (e exact, SI 2019)
    text = textwrap.dedent("""
        [model]
        I = "n * e * f * (1 + x)"
        [units]
        I = "pA"
        [constants]
        n = 1
        f = {value = 600, unit = "MHz"}
        [monte_carlo]
        enabled = false
        [inputs.x]
        value = 0.0
        standard_uncertainty = 1e-8
        unit = "1"
        """)
    m = evaluate(parse_spec(text), monte_carlo_enabled=False).measurand("I")
    assert m.value == near(1.602176634e-19 * 600e6 * 1e12, rel=1e-14)
    with pytest.raises(SpecError, match="constants.n.*carries no unit"):
        parse_spec(text.replace("n = 1", 'n = {value = 1, unit = "A"}'))


# --------------------------------------------------------------------------- the cases
def _copy_example(tmp_path: Path, name: str) -> Path:
    dst = tmp_path / name
    shutil.copytree(ROOT / "worked_examples" / name, dst)
    return dst / "spec.toml"


def test_resistor_chain_with_readings_in_microvolt(tmp_path):
    # issue 10 case 1: unit = "µV" on the on/off input gave delta_I ≈ 1e12 with exit 0
    spec_path = _copy_example(tmp_path, "resistor_chain")
    base = evaluate(load_spec(spec_path), monte_carlo_enabled=False)
    csv = spec_path.parent / "data" / "onoff_10h.csv"
    lines = csv.read_text().splitlines()
    head = [i for i, ln in enumerate(lines) if ln.startswith("time_s")][0]
    out = lines[:head + 1]
    for ln in lines[head + 1:]:
        t, v, p = ln.split(",")
        out.append(f"{t},{float(v) * 1e6!r},{p}")
    csv.write_text("\n".join(out) + "\n")
    spec_path.write_text(spec_path.read_text().replace('unit = "V"', 'unit = "µV"', 1))
    micro = evaluate(load_spec(spec_path), monte_carlo_enabled=False)
    for name in ("I", "delta_I"):
        a, b = base.measurand(name), micro.measurand(name)
        assert b.value == near(a.value, rel=1e-9, abs=1e-9 * a.standard_uncertainty)
        assert b.expanded_uncertainty == near(a.expanded_uncertainty, rel=1e-9)


def test_chain_input_of_wrong_dimension_is_refused():
    # issue 10 case 3 in its wrong-dimension form: a reading in V where the chain needs A
    text = (ROOT / "tests" / "bad_inputs").exists()
    assert text
    spec = textwrap.dedent("""
        [model]
        chain = "ammeter-under-test"
        n = 1
        [monte_carlo]
        enabled = false
        [inputs.I_read]
        value = 96.1
        standard_uncertainty = 0.001
        unit = "mV"
        [inputs.f]
        value = 600
        standard_uncertainty = 1e-6
        unit = "MHz"
        [inputs.delta_pump]
        value = 0.0
        standard_uncertainty = 1e-8
        """)
    # the error names the input's unit key, where the typo is (a review once found it naming
    # the chain's output instead)
    with pytest.raises(BudgetError, match=r"input I_read of the chain must be A .*makes it V") \
            as info:
        evaluate(parse_spec(spec), monte_carlo_enabled=False)
    assert info.value.field == "inputs.I_read.unit"


def test_ammeter_reading_in_picoampere_gives_the_right_deviation():
    # issue 10 case 3: I_read in pA gave 10¹⁸ ppm; n·e·f at 600 MHz = 96.1305980 pA (SI 2019)
    nef = 1.602176634e-19 * 600e6 * 1e12
    spec = textwrap.dedent(f"""
        [model]
        chain = "ammeter-under-test"
        n = 1
        [monte_carlo]
        enabled = false
        [inputs.I_read]
        value = {nef * (1 + 2e-6)!r}
        standard_uncertainty = 0.0001
        unit = "pA"
        [inputs.f]
        value = 600
        standard_uncertainty = 1e-9
        unit = "MHz"
        [inputs.delta_pump]
        value = 0.0
        standard_uncertainty = 1e-8
        """)
    b = evaluate(parse_spec(spec), monte_carlo_enabled=False)
    dev = [m for m in b.measurands if m.name == "delta_I"][0]
    assert dev.value == near(2.0, rel=1e-6)          # 2 parts in 10⁶, by construction


def test_cli_unknown_unit_exit_2_one_line(tmp_path):
    p = tmp_path / "s.toml"
    p.write_text(SPEC.format(units="", v=1.0, uv=0.1, vunit='unit = "uv"', r=1.0, ur=0.1,
                             runit=""))
    r = subprocess.run([sys.executable, "-m", "budget", "run", str(p), "--json",
                        str(tmp_path / "o.json")], capture_output=True, text=True, timeout=120)
    assert r.returncode == 2
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "uv" in lines[0] and "µV" in lines[0]
    assert not (tmp_path / "o.json").exists()


def test_fast_path_symbols_agree_with_pint():
    # budget.units resolves coherent SI symbols without loading pint; pint is the reference
    from budget import units
    for text, dims in units._FAST.items():
        if text in ("", "1"):
            continue
        q = registry().Quantity(1.0, units._pint_text(text))
        assert units._dims_of(q.dimensionality) == dims, text
        assert q.to_base_units().magnitude == near(1.0, rel=1e-15), text


CHAIN = """
[model]
chain = "resistor-voltmeter"
n = 1
{units}
[monte_carlo]
enabled = false
[inputs.g]
value = 1.00000012
standard_uncertainty = 2e-8
[inputs.dV]
value = {dv}
standard_uncertainty = {udv}
{dvu}
[inputs.R]
value = {r}
standard_uncertainty = {ur}
{ru}
[inputs.f]
value = {f}
standard_uncertainty = {uf}
{fu}
"""


def test_the_same_chain_budget_written_three_ways():
    # issue 10 "Done when", typed-in form: the numbers are one budget in three spellings
    # (prefix factors from SI Brochure 9th ed. Table 7); SI values agree to 1e-12, same U
    si = CHAIN.format(units="", dv=0.0961306, udv=2e-9, dvu='unit = "V"', r=1.0000021e9,
                      ur=5.0, ru='unit = "Ω"', f=600e6, uf=1e-3, fu='unit = "Hz"')
    micro = CHAIN.format(units='[units]\nI = "pA"', dv=96130.6, udv=0.002, dvu='unit = "µV"',
                         r=1.0000021, ur=5e-9, ru='unit = "GΩ"', f=600e6, uf=1e-3,
                         fu='unit = "Hz"')
    mega = CHAIN.format(units="", dv=0.0961306, udv=2e-9, dvu='unit = "V"', r=1.0000021e9,
                        ur=5.0, ru='unit = "Ω"', f=600.0, uf=1e-9, fu='unit = "MHz"')
    a, b, c = (evaluate(parse_spec(t), monte_carlo_enabled=False) for t in (si, micro, mega))
    scale = {"A": 1.0, "pA": 1e-12}
    for name in ("I", "delta_I"):
        ma, mb, mc = a.measurand(name), b.measurand(name), c.measurand(name)
        f = scale.get(mb.unit, 1.0)
        assert mb.value * f == near(ma.value, rel=1e-12, abs=1e-12 * ma.standard_uncertainty)
        assert mc.value == near(ma.value, rel=1e-12, abs=1e-12 * ma.standard_uncertainty)
        assert mb.expanded_uncertainty * f == near(ma.expanded_uncertainty, rel=1e-12)
        assert mc.expanded_uncertainty == near(ma.expanded_uncertainty, rel=1e-12)
    assert (a.measurand("I").unit, b.measurand("I").unit) == ("A", "pA")
