"""The report for an auditor (issue 13 item 4): module diagnostics as labelled rows with units
and GUM rounding, figure axes without offset notation, no table for the trivial correlation
of an output with a function of itself.

Sources: JCGM 100:2008 §7.2.6 (an uncertainty to two significant digits, the value to the same
place); SI Brochure (9th ed., 2019) §3 (prefixes: n = 10⁻⁹); the correlation of y and 2y is
exactly 1 (JCGM 100 §5.2.2 with c = 2, by hand). The SVG is read back with xml.etree.
"""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET

from budget.engine import evaluate
from budget.report import render_html
from budget.report.diagnostic_labels import diagnostic_table, label_of
from budget.report.figures import module_figure
from budget.spec import parse_spec


def test_labels_carry_words_and_units():
    assert label_of("max_abs_residual_V") == "largest |residual| (V)"
    assert label_of("mean_difference", "V") == "mean difference (V)"
    assert label_of("voltage_coefficient_per_V") == "voltage coefficient (/V)"
    assert label_of("drift_per_year", "Ω") == "drift per year (Ω/a)"
    assert label_of("birge_ratio") == "Birge ratio"


def test_values_rounded_as_the_gum_says_and_no_raw_python():
    rows = dict(diagnostic_table({
        "unit": "V", "mean_difference": 0.0961306558989, "u": 3.727399428819701e-08,
        "ratio_G": 1.0000003359, "u_ratio_G": 5.89288e-9, "inflated": False,
        "fit": {"chi2": None}, "noise_density": 4.003446017878479e-06}))
    assert rows["mean difference (V)"] == "0.096130656"     # to the place of u's 2nd digit
    assert rows["standard uncertainty (V)"] == "3.7×10⁻⁸"   # two significant digits
    assert rows["gain ratio G"] == "1.0000003359"           # the 0.34·10⁻⁶ correction shows
    assert rows["inflated"] == "no"
    assert rows["fit: χ²"] == "not computed"
    assert rows["noise density"] == "4.00345×10⁻⁶"          # no u beside it: six digits


def test_axis_in_nanovolts_without_offset_text():
    fig = {"id": "res", "title": "residuals", "xlabel": "reference (V)",
           "ylabel": "reading − fitted line (V)", "xscale": "linear", "yscale": "linear",
           "series": [{"label": "residuals", "style": "points", "x": [-0.2, 0.0, 0.2],
                       "y": [1.3e-9, -4.4e-9, 2.1e-9]}]}
    svg = module_figure(fig)
    texts = " ".join(t.text or "" for t in ET.fromstring(svg).iter()
                     if t.tag.endswith("text"))
    assert "(nV)" in texts
    assert not re.search(r"1e[−-]9|×10|10⁻⁹", texts)        # no offset or multiplier text


def test_trivial_correlation_table_left_out():
    spec = parse_spec("""
[budget]
title = "y and 2y (invented numbers)"
[model]
y = "a + b"
z = "2 * y"
[monte_carlo]
enabled = false
[inputs.a]
value = 1.0
standard_uncertainty = 0.1
[inputs.b]
value = 2.0
standard_uncertainty = 0.2
""")
    html = render_html(evaluate(spec))
    assert "Between measurands" not in html
    assert "y and z: correlation coefficient 1.000" in re.sub(r"\s+", " ", html)


def test_summary_first_with_top_five_and_warnings():
    # the summary's rules: largest shares first, at most five (issue 13 item 4); the shares
    # of y = a + b + … with u = 0.1·i are i²/Σi² (JCGM 100 eq. 10, c = 1; by hand)
    names = [f"x{i}" for i in range(1, 8)]
    text = "[budget]\ntitle = \"seven terms (invented numbers)\"\n[model]\ny = \"" + \
        " + ".join(names) + "\"\n[monte_carlo]\nenabled = false\n" + "".join(
            f"[inputs.{n}]\nvalue = 1.0\nstandard_uncertainty = {0.1 * i:.1f}\n"
            for i, n in enumerate(names, 1))
    html = render_html(evaluate(parse_spec(text)))
    head = html[html.index('id="summary"'):html.index('id="results"')]
    top = re.findall(r'<td class="q">(x\d)</td>', head)
    assert top == ["x7", "x6", "x5", "x4", "x3"]
    assert "… and 2 more in the budget table" in head
    assert "Warnings" in head and "None." in head
    assert f"{100 * 49 / 140:.1f} %" in head          # 7²/Σ_{i=1..7} i² = 49/140


def test_comparison_figure_names_the_runs_titles():
    from budget.report.figures import compare_figure
    fig = {"id": "cmp", "title": "runs", "xlabel": "run", "ylabel": "dev (µA/A)",
           "xscale": "linear", "yscale": "linear",
           "series": [{"label": "runs", "style": "points", "x": [1, 2], "y": [0.1, -0.2],
                       "yerr": [0.5, 0.6]}]}
    svg = compare_figure(fig, ["run 1", "run 2"], ["Pump A at 600 MHz (invented)",
                                                   "Cost $5 (invented)"])
    texts = " ".join(t.text or "" for t in ET.fromstring(svg).iter() if t.tag.endswith("text"))
    assert "Pump A at 600 MHz (invented)" in texts and "Cost $5 (invented)" in texts
