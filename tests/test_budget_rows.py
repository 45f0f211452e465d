"""The budget table's layout: signed contributions, rows grouped by origin, share bars.

Sources:
* EA-4/02 M:2022, supplement example S3 (calibration of a 10 kΩ standard resistor): its
  budget table lists the contributions u_i(R_X) signed and in Ω: R_S 2.5 mΩ, δR_D 5.8 mΩ,
  δR_TS 1.6 mΩ, r_C 4.1 mΩ, r 0.7 mΩ, δR_TX −3.2 mΩ; u(R_X) = 8.3 mΩ (memory; the inputs
  are in budget/references/ea402_s3.toml).
* JCGM 100:2008 §5.1.3: u_i(y) = c_i·u(x_i); without correlations the shares
  u_i²/u_c² add up to 1.
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest
from numeric import near

from budget import evaluate, load_spec, parse_spec
from budget.budget_rows import column_headings, grouped_rows, text_bar
from budget.report import render_html
from budget.text import budget_text

REFERENCE = Path(__file__).resolve().parents[1] / "budget" / "references" / "ea402_s3.toml"
EXAMPLES = Path(__file__).resolve().parents[1] / "worked_examples"

# EA-4/02 S3 (memory): u_i(R_X) in mΩ, signed as the published table prints them
EA_S3_CONTRIBUTIONS_MOHM = {"R_S": 2.5, "dR_D": 5.8, "dR_TS": 1.6, "r_C": 4.1, "r": 0.7,
                            "dR_TX": -3.2}


@pytest.fixture(scope="module")
def ea_s3():
    return evaluate(load_spec(REFERENCE), monte_carlo_enabled=False)


def test_signed_contributions_are_ea402_s3(ea_s3):
    m = ea_s3.measurand("R_X")
    rows = {r.term.name: r for g in grouped_rows(ea_s3, m) for r in g.rows}
    assert set(rows) == set(EA_S3_CONTRIBUTIONS_MOHM)
    for name, mohm in EA_S3_CONTRIBUTIONS_MOHM.items():
        # the published table has two significant digits: agree to half a unit in the last
        assert rows[name].contribution * 1e3 == near(mohm, abs=0.05), name
        # u_i(y) = c_i·u(x_i) (JCGM 100 §5.1.3), sign of c_i kept
        t = rows[name].term
        assert rows[name].contribution == near(t.sensitivity * t.standard_uncertainty,
                                               rel=1e-12)
    # no correlations: shares are u_i²/u_c² and add up to 1 (JCGM 100 §5.1.2)
    assert sum(r.share for r in rows.values()) == near(1.0, rel=1e-12)


def test_terminal_table_has_the_ea402_columns_and_signs(ea_s3):
    text = budget_text(ea_s3)
    head = next(line for line in text.splitlines() if "X_i" in line)
    # EA-4/02 column order: X_i, x_i, u(x_i), (type, ν_i), distribution, c_i, u_i(y)
    order = [head.index(h) for h in ("X_i", "x_i", "u(x_i)", "type", "ν_i", "distribution",
                                     "c_i", "u_i(R_X) / Ω", "u_i²/u_c²(R_X)")]
    assert order == sorted(order)
    row = next(line for line in text.splitlines() if line.startswith("  dR_TX "))
    assert "-0.0032" in row                     # EA-4/02 S3: −3.2 mΩ
    assert "%" in row and "share" not in text   # the share sits beside its bar, no column
    # typed-in inputs form one group under a sub-heading naming the spec file
    assert "typed into the spec ea402_s3.toml" in text


def test_html_table_has_bars_and_signed_contributions(ea_s3):
    html = render_html(ea_s3, figures=False)
    assert "−0.0032" in html                    # EA-4/02 S3 δR_TX, typeset minus
    table = html[html.index('class="grid budget"'):]        # the summary draws bars too
    assert table.count('class="bar"') == len(EA_S3_CONTRIBUTIONS_MOHM)
    assert "|c<sub>i</sub>·u" not in html and "share of u<sub>c</sub>²" not in html
    assert 'class="group"' in html


def test_module_rows_are_grouped_under_their_module_and_file():
    b = evaluate(load_spec(EXAMPLES / "amplifier_chain" / "spec.toml"),
                 monte_carlo_enabled=False)
    m = b.measurand("I")
    groups = grouped_rows(b, m)
    headings = [g.heading for g in groups]
    assert "A_TR: input module amplifier, file data/amplifier_history.csv" in headings
    assert "dV: input module cycles, file data/onoff_4h.csv" in headings
    # every term exactly once; groups in order of their summed share
    names = [r.term.name for g in groups for r in g.rows]
    assert sorted(names) == sorted(t.name for t in m.terms)
    assert [g.share for g in groups] == sorted((g.share for g in groups), reverse=True)
    a_tr = next(g for g in groups if g.heading.startswith("A_TR:"))
    assert {r.term.name for r in a_tr.rows} == {"A_TR_cal", "A_TR_temp", "A_TR_stab",
                                                 "A_TR_offset"}


def test_synthetic_truth_contribution_signs_follow_the_model():
    # Y = A − 3·B: c_A = +1, c_B = −3 (derivation); u_i = c_i·u exactly
    spec = parse_spec('[budget]\ntitle = "t (invented)"\n[model]\nY = "A - 3 * B"\n'
                      '[inputs.A]\nvalue = 1\nstandard_uncertainty = 0.4\n'
                      '[inputs.B]\nvalue = 2\nstandard_uncertainty = 0.1\n', file="spec.toml")
    b = evaluate(spec, monte_carlo_enabled=False)
    rows = {r.term.name: r for g in grouped_rows(b, b.measurand("Y")) for r in g.rows}
    assert rows["A"].contribution == near(0.4, rel=1e-12)
    assert rows["B"].contribution == near(-0.3, rel=1e-12)
    # shares 0.16/0.25 and 0.09/0.25 (derivation)
    assert rows["A"].share == near(0.64, rel=1e-12)
    assert rows["B"].share == near(0.36, rel=1e-12)


def test_text_bar_eighths():
    # 12 cells of 8 eighths: 0.5 → 6 full cells; 1/96 → one eighth; 0 → blank
    assert text_bar(0.5, 12) == "██████" + " " * 6
    assert text_bar(1 / 96, 12) == "▏" + " " * 11
    assert text_bar(0.0, 12) == " " * 12
    assert text_bar(1e-9, 12).startswith("▏")    # a contributing row is never drawn empty
    assert text_bar(-0.2, 4) == "    " and text_bar(1.3, 4) == "████"   # clipped
    assert text_bar(math.nan, 4) == "    "


def test_column_headings_units():
    assert column_headings("I", "A")["contribution"] == "u_i(I) / A"
    assert column_headings("d", "µA/A")["contribution"] == "u_i(d) / (µA/A)"
    assert column_headings("r", "1")["contribution"] == "u_i(r)"
