"""Tests of budget.chains.

References: SI Brochure, 9th edition (e = 1.602176634e-19 C exact; e·f at 1 GHz =
160.2176634 pA), also in scipy.constants; exact rational arithmetic (fractions.Fraction) as the
reference for the digits of a deviation near 1e-9; the chain equations of issue 3
(I = g·ΔV/R, I = g·ΔV/A_TR, ε = I_read/(n·e·f·(1 + δ_pump)) − 1), a fact of the trade.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest
from numeric import near
from scipy import constants

from budget.chains import CHAINS, ChainModel, build_chain, validate_n
from budget.errors import SpecError
from budget.expression import compile_node, names, parse
from budget.model import BUILTIN_CONSTANTS
from budget.units import display_factor, parse_unit

E = 1.602176634e-19   # C, SI Brochure 2019 (exact)


def build(**table):
    return build_chain({"chain": "resistor-voltmeter", **table}, file="spec.toml",
                       lines={"": 4, "chain": 5, "deviation_unit": 6, "n": 7})


def evaluate(model: ChainModel, env: dict) -> dict:
    out = {}
    for name, text in model.outputs.items():
        out[name] = compile_node(parse(text))({**env, **out})
    return out


def test_builtin_defining_constants_are_the_exact_si_values():
    # SI Brochure, 9th ed. (2019), Table 1: e, h, k_B exact by definition; R_K = h/e² and
    # K_J = 2e/h follow exactly (CODATA 2018 prints R_K = 25 812.807 45... Ω and
    # K_J = 483 597.848 4... GHz/V, memory). scipy.constants carries the same SI values.
    assert BUILTIN_CONSTANTS["e"] == E == constants.e
    assert BUILTIN_CONSTANTS["h"] == 6.62607015e-34
    assert BUILTIN_CONSTANTS["k_B"] == 1.380649e-23
    assert BUILTIN_CONSTANTS["R_K"] == near(25812.80745, rel=5e-10)
    assert BUILTIN_CONSTANTS["K_J"] == near(483597.8484e9, rel=5e-10)


def test_resistor_voltmeter_outputs():
    m = build()
    assert list(m.outputs) == ["I", "delta_I"]
    assert m.units == {"I": "A", "delta_I": "µA/A"}   # ppm is not shown (SI Brochure §5.4.7)
    assert set(m.inputs) == {"g", "dV", "R", "f"}
    assert m.input_units["R"] == "Ω"
    # e·f at 1 GHz = 160.2176634 pA (SI Brochure); through 1 GΩ that is 0.1602176634 V
    env = {"g": 1.0, "dV": 0.1602176634, "R": 1e9, "f": 1e9, "n": 1, "e": E}
    out = evaluate(m, env)
    assert out["I"] == near(160.2176634e-12, rel=1e-15)
    # the model's deviation is a pure number (working unit "1"); µA/A is its display unit
    assert m.working_units == {"I": "A", "delta_I": "1"}
    assert abs(out["delta_I"]) < 1e-15     # zero up to float rounding (≈ 1e-16)


def test_amplifier_and_ammeter_chains():
    a = build_chain({"chain": "amplifier-voltmeter", "deviation_unit": "1e-8"},
                    file="s.toml", lines={})
    assert list(a.outputs) == ["I", "delta_I"] and "A_TR" in a.inputs
    # n = 2 at 500 MHz gives 160.2176634 pA too (REFERENCES.md, SI constants)
    env = {"g": 1.0 + 1e-8, "dV": 0.1602176634, "A_TR": 1e9, "f": 500e6, "n": 2, "e": E}
    out = evaluate(a, env)
    assert out["delta_I"] == near(1e-8, rel=1e-6)  # g = 1 + 1e-8 ⇒ +1 part in 10^8
    t = build_chain({"chain": "ammeter-under-test"}, file="s.toml", lines={})
    assert list(t.outputs) == ["eps", "delta_I"]
    assert set(t.inputs) == {"I_read", "f", "delta_pump"}
    env = {"I_read": 160.2176634e-12 * (1 + 3e-7), "f": 1e9, "n": 1, "e": E,
           "delta_pump": 1e-7}
    out = evaluate(t, env)
    # ε = (1 + 3e-7)/(1 + 1e-7) − 1 (definition)
    assert out["eps"] == near((1 + 3e-7) / (1 + 1e-7) - 1, rel=1e-7)
    assert out["delta_I"] == near(3e-7, rel=1e-7)


@pytest.mark.parametrize("chain", CHAINS)
def test_deviation_near_1e9_keeps_its_digits(chain):
    # exact rational arithmetic on the very float inputs is the reference; the chain's
    # float64 result must agree to 1e-6 relative (six significant digits of a 1.234567e-9)
    m = build_chain({"chain": chain}, file="s.toml", lines={})
    d = 1.234567e-9
    n, f = 3, 600e6
    nef = n * E * f
    if chain == "ammeter-under-test":
        env = {"I_read": nef * (1 + d), "f": f, "n": n, "e": E, "delta_pump": 0.0}
        exact = Fraction(env["I_read"]) / (n * Fraction(E) * Fraction(f)) - 1
    else:
        big = "R" if chain == "resistor-voltmeter" else "A_TR"
        env = {"g": 1.0, "dV": nef * 1e9 * (1 + d), big: 1e9, "f": f, "n": n, "e": E}
        exact = (Fraction(env["g"]) * Fraction(env["dV"])
                 / (n * Fraction(E) * Fraction(f) * Fraction(1e9)) - 1)
    dev = evaluate(m, env)["delta_I"]
    assert float(exact) == near(d, rel=1e-6)        # the inputs carry the deviation
    assert dev == near(float(exact), rel=1e-6)
    # vectorised (Monte Carlo) evaluation gives the same digits
    vec = evaluate(m, {k: np.full(4, v) if isinstance(v, float) else v for k, v in env.items()})
    np.testing.assert_allclose(vec["delta_I"], dev, rtol=1e-12)


def test_n_from_model_table_and_renames():
    m = build(n=2, inputs_map={"R": "R1G", "dV": "V_diff"}, outputs_map={"I": "I_pump"},
              description="my chain")
    assert m.constants == {"n": 2}
    assert m.outputs["I_pump"] == "g * V_diff / R1G"
    assert names(parse(m.outputs["delta_I"])) == {"g", "V_diff", "R1G", "f", "n", "e"}
    assert m.description == "my chain"
    assert set(m.to_dict()) >= {"outputs", "units", "description"}


@pytest.mark.parametrize("table, field, words", [
    ({"chan": "x"}, "model.chan", "did you mean 'chain'"),
    ({"deviaton_unit": "ppm"}, "model.deviaton_unit", "did you mean 'deviation_unit'"),
    ({"I": "g*dV/R"}, "model.I", "free-form"),
    ({"deviation_unit": "ppb"}, "model.deviation_unit", "must be one of"),
    ({"n": 0}, "model.n", "positive integer"),
    ({"n": -1}, "model.n", "positive integer"),
    ({"n": 1.5}, "model.n", "positive integer"),
    ({"n": True}, "model.n", "positive integer"),
    ({"n": "2"}, "model.n", "positive integer"),
    ({"inputs_map": {"Q": "x"}}, "model.inputs_map", "not a name"),
    ({"inputs_map": {"R": "1x"}}, "model.inputs_map", "identifier"),
    ({"inputs_map": {"R": "I"}}, "model.inputs_map", "clash"),
    ({"inputs_map": {"R": "e"}}, "model.inputs_map", "clash"),
    ({"outputs_map": {"I": "delta_I"}}, "model.outputs_map", "distinct"),
    ({"inputs_map": ["R"]}, "model.inputs_map", "table"),
])
def test_bad_tables(table, field, words):
    with pytest.raises(SpecError) as e:
        build(**table)
    assert e.value.field == field
    assert words in e.value.message
    assert e.value.file == "spec.toml"


def test_unknown_chain_did_you_mean_and_line():
    with pytest.raises(SpecError) as e:
        build_chain({"chain": "resistor-voltmeters"}, file="spec.toml", lines={"chain": 9})
    assert "did you mean 'resistor-voltmeter'" in e.value.message and e.value.line == 9


def test_validate_n():
    assert validate_n(2) == 2
    with pytest.raises(SpecError) as e:
        validate_n(0, file="spec.toml", line=3, field="constants.n")
    assert (e.value.line, e.value.field) == (3, "constants.n")


@pytest.mark.parametrize("key, name, unit, per", [
    ("10⁻⁶", "delta_I", "µA/A", 1.0), ("µA/A", "delta_I", "µA/A", 1.0),
    ("ppm", "delta_I", "µA/A", 1.0),      # accepted spelling, not shown (SI Brochure §5.4.7)
    ("10⁻⁸", "delta_I", "×10⁻⁸", 100.0), ("10⁻⁹", "delta_I", "nA/A", 1000.0),
    ("nA/A", "delta_I", "nA/A", 1000.0),
])
def test_deviation_units(key, name, unit, per):
    # g = 1 + 1e-6 ⇒ one part in 10⁶ = 100 parts in 10⁸ = 1000 parts in 10⁹ (derivation)
    c = build_chain({"chain": "amplifier-voltmeter", "deviation_unit": key}, file="s.toml",
                    lines={})
    assert c.units[name] == unit and c.working_units[name] == "1"
    env = {"g": 1.0 + 1e-6, "dV": 0.1602176634, "A_TR": 1e9, "f": 500e6, "n": 2, "e": E}
    shown = display_factor(parse_unit("1"), parse_unit(unit))   # 10⁶, 10⁸, 10⁹ exactly
    assert evaluate(c, env)[name] * shown == near(per, rel=1e-6)
