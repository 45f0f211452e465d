"""Measurands as a metrologist writes them (issue 13 item 2): ``[outputs.NAME]`` symbol, name
and definition; the chains fill them in; the model typeset as mathematics with a table of
symbols, units and meanings in the report and the certificate.

Sources:

* ISO 80000-1:2009 §7.1 and the SI Brochure (9th ed., 2019) §5.4.1 (memory): quantity symbols
  in italic, descriptive subscripts upright, function names (exp, ln, sin) upright, a product
  of quantities by juxtaposition (a thin space), a number times a power of ten as
  "1.6 × 10⁻¹⁹" — common practice of typesetting in metrology.
* The SI Brochure §2.2 (2019): e = 1.602176634 × 10⁻¹⁹ C exactly.
* The typeset SVG is read back with Python's xml.etree (an independent XML parser).
* The mathtext strings are checked against matplotlib's own mathtext parser (an open
  reference library): every string the module writes must parse there.
"""

from __future__ import annotations

import base64
import re
import xml.etree.ElementTree as ET

import pytest

from budget import expression as ex
from budget.engine import evaluate
from budget.errors import SpecError
from budget.report import render_html
from budget.report.maths import equation_svg, equation_tex, symbol_tex, tree_tex
from budget.report.model_view import model_view, symbol_html
from budget.spec import parse_spec

SPEC = """
[budget]
title = "Measurand test (invented numbers)"
[model]
P = "U**2 / R_L"
[outputs.P]
symbol = "P_L"
name = "power dissipated in the load"
definition = "mean electrical power in the load resistor over the 10 s window"
[monte_carlo]
enabled = false
[inputs.U]
value = 2.0
standard_uncertainty = 0.001
unit = "V"
description = "voltage across the load"
[inputs.R_L]
value = 100.0
standard_uncertainty = 0.01
unit = "Ω"
"""

CHAIN = """
[budget]
title = "Chain test (invented numbers)"
[model]
chain = "resistor-voltmeter"
n = 1
outputs_map = {I = "I_pump"}
[outputs.delta_I]
name = "deviation from n·e·f"
[monte_carlo]
enabled = false
[inputs.g]
value = 1.0
standard_uncertainty = 1e-7
[inputs.dV]
value = 0.1
standard_uncertainty = 1e-8
unit = "V"
[inputs.R]
value = 1e9
standard_uncertainty = 10
unit = "Ω"
[inputs.f]
value = 6.24e8
standard_uncertainty = 0.001
unit = "Hz"
"""


def test_spec_keys_reach_the_record():
    b = evaluate(parse_spec(SPEC))
    assert b.run["outputs"]["P"] == {"symbol": "P_L", "name": "power dissipated in the load",
                                     "definition": "mean electrical power in the load resistor "
                                                   "over the 10 s window"}


def test_chain_fills_symbols_and_keeps_spec_overrides():
    s = parse_spec(CHAIN)
    assert s.output_info["I_pump"]["symbol"] == "I_P"           # the chain's, renamed output
    assert s.output_info["I_pump"]["name"] == "pump current"
    assert s.output_info["delta_I"]["name"] == "deviation from n·e·f"   # the spec wins
    assert s.output_info["delta_I"]["symbol"] == "δ_P"          # the rest stays the chain's
    assert s.input_info["dV"][:2] == ("ΔV", "on/off voltage difference read by the voltmeter")
    assert s.input_info["f"][2] == "Hz"


@pytest.mark.parametrize("table, words", [
    ('[outputs.Q]\nname = "x"', "is not an output"),
    ('[outputs.P]\nsymbl = "P"', "did you mean 'symbol'"),
    ('[outputs.P]\nsymbol = "P^2"', "optional subscript"),
])
def test_bad_outputs_tables_are_located(table, words):
    text = SPEC.replace("[monte_carlo]", table + "\n[monte_carlo]", 1).replace(
        '[outputs.P]\nsymbol = "P_L"\nname = "power dissipated in the load"\n'
        'definition = "mean electrical power in the load resistor over the 10 s window"\n', "")
    with pytest.raises(SpecError) as exc:
        parse_spec(text, file="s.toml")
    assert words in str(exc.value) and exc.value.line is not None


@pytest.mark.parametrize("symbol, tex", [
    ("I_P", r"I_{\mathrm{P}}"),          # descriptive subscript upright (ISO 80000-1 §7.1)
    ("δ_I", r"\delta_{\mathrm{I}}"),
    ("ΔV", r"\Delta V"),                 # Δ upright, V italic
    ("f0", r"f_{\mathrm{0}}"),
    ("delta_pump", r"\delta_{\mathrm{pump}}"),
    ("ratio", r"\mathrm{ratio}"),         # a word is not a product of letters
])
def test_symbol_tex(symbol, tex):
    assert symbol_tex(symbol) == tex


@pytest.mark.parametrize("expr, tex", [
    ("g * dV / R", r"\dfrac{g\,\mathrm{dV}}{R}"),
    ("(g * dV / (n * e * f * R) - 1) * 1000000",
     r"\left(\dfrac{g\,\mathrm{dV}}{n\,e\,f\,R} - 1\right) \cdot 10^{6}"),
    ("a - (b - c)", r"a - \left(b - c\right)"),
    ("-(a + b) * c", r"-\left(a + b\right)\,c"),
    ("sqrt(a**2 + b**2)", r"\sqrt{a^{2} + b^{2}}"),
    ("exp(-E / (k * T))", r"\exp\left(\dfrac{-E}{k\,T}\right)"),
    ("x * 1.602176634e-19", r"x \cdot 1.602176634 \times 10^{-19}"),
    ("(a + b)**2", r"\left(a + b\right)^{2}"),
])
def test_tree_tex(expr, tex):
    assert tree_tex(ex.parse(expr), {}) == tex


def test_every_tex_parses_in_mathtext_and_the_svg_has_no_text():
    from matplotlib.mathtext import MathTextParser
    parser = MathTextParser("path")
    for expr in ("g * dV / R", "abs(x) * sign(y) - log10(z)", "arctan(y / x) + cosh(t)",
                 "tau_1 * alpha_s / x_ref**0.5"):
        tex = equation_tex("Y_out", expr, {"dV": "ΔV"})
        parser.parse(tex)                                # raises ValueError when it cannot
        svg = equation_svg(tex)
        root = ET.fromstring(svg)
        ns = "{http://www.w3.org/2000/svg}"
        assert root.iter(ns + "path") and not list(root.iter(ns + "text"))  # glyphs as paths
        assert svg == equation_svg(tex)                  # no time stamp, stable ids


def test_large_models_are_left_as_text():
    big = " + ".join(f"x{i}" for i in range(200))
    assert equation_tex("y", big, {}) is None


def test_symbol_html_escapes():
    assert str(symbol_html("I_P")) == "<i>I</i><sub>P</sub>"
    assert str(symbol_html("ΔV")) == "Δ<i>V</i>"
    assert "<script>" not in str(symbol_html("<script>"))


def test_report_and_certificate_show_the_model_and_its_symbols():
    b = evaluate(parse_spec(SPEC))
    view = model_view(b)
    assert [r[1:] for r in view["symbols"]] == [
        ("power dissipated in the load", "W",
         "mean electrical power in the load resistor over the 10 s window"),
        ("voltage across the load", "V", "input, typed in (Type B)"),
        ("", "Ω", "input, typed in (Type B)")]
    eq = view["equations"][0]
    assert eq["text"] == "P = U**2 / R_L" and eq["image"].startswith("data:image/svg+xml")
    svg = base64.b64decode(eq["image"].split(",", 1)[1]).decode()
    assert "<svg" in svg
    for cert in (False, True):
        html = render_html(b, certificate=cert)
        flat = re.sub(r"\s+", " ", re.sub(r"<[^>]+>", " ", html))
        assert "Measurement model" in flat and "power dissipated in the load" in flat
        assert 'class="eq"' in html
        assert "<i>P</i><sub>L</sub>" in html


def test_chain_report_states_e_exact():
    b = evaluate(parse_spec(CHAIN))
    rows = {str(r[0]): r for r in model_view(b)["symbols"]}
    assert rows["<i>e</i>"][2] == "C" and "1.602176634e-19" in rows["<i>e</i>"][3]
    assert rows["Δ<i>V</i>"][2] == "V" and rows["<i>f</i>"][2] == "Hz"
