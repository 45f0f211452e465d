"""Each budget row shows the unit of u(x_i) and of c_i (terminal, explain, report rows).

Check values: c_i = ∂y/∂x_i has the unit of y per unit of x_i (JCGM 100 §5.1.3); for
I = V/R, ∂I/∂V = 1/R (A/V) and ∂I/∂R = −V/R² (A/Ω), derived by hand; micro/pico prefixes from
SI Brochure 9th ed. Table 7. Invented numbers.
"""

from __future__ import annotations

import pytest

from budget import evaluate, parse_spec
from budget.budget_rows import sensitivity_unit
from budget.report.context import _term_groups
from budget.text.budget_table import budget_rows_text

SPEC = """
[model]
I = "V_on / R * g"
{units}
[monte_carlo]
enabled = false
[inputs.V_on]
value = 0.0961
standard_uncertainty = 2e-8
unit = "V"
[inputs.R]
value = 1.0e9
standard_uncertainty = 50.0
unit = "Ω"
[inputs.g]
value = 1.0
standard_uncertainty = 1e-8
unit = "1"
"""


@pytest.mark.parametrize("y, x, want", [
    ("A", "V", "A/V"), ("pA", "Ω", "pA/Ω"), ("A", "1", "A"), ("A", "", "A"),
    ("1", "Ω", "1/Ω"), ("", "", ""), ("V", "V", ""), ("µA/A", "Hz", "(µA/A)/Hz"),
])
def test_sensitivity_unit_is_y_per_x(y, x, want):
    assert sensitivity_unit(y, x) == want


def test_terminal_rows_show_the_units_of_u_and_c():
    b = evaluate(parse_spec(SPEC.format(units='[units]\nI = "pA"')), monte_carlo_enabled=False)
    text = budget_rows_text(b, b.measurand("I"))
    row = {ln.split()[0]: ln for ln in text.splitlines() if ln.strip()[:2] in ("V_", "R ", "g ")}
    assert "2.0e-08 V" in row["V_on"] and "pA/V" in row["V_on"]   # ∂I/∂V = 1/R, shown in pA/V
    assert "50 Ω" in row["R"] and "pA/Ω" in row["R"]
    assert "96.10 pA " in row["g"]          # ∂I/∂g = V/R = 96.1 pA, per unit of g
    # ∂I/∂V = 1/R = 1e-9 A/V = 1e3 pA/V (pico = 1e-12)
    t = b.measurand("I").term("V_on")
    assert abs(t.sensitivity - 1e3) < 1e-9


def test_report_rows_carry_the_units():
    b = evaluate(parse_spec(SPEC.format(units="")), monte_carlo_enabled=False)
    rows = {r["name"]: r for g in _term_groups(b, b.measurand("I")) for r in g["rows"]}
    assert rows["V_on"]["u"].endswith(" V") and rows["V_on"]["c"].endswith(" A/V")
    assert rows["R"]["u"].endswith(" Ω") and rows["R"]["c"].endswith(" A/Ω")
    assert rows["g"]["c"].endswith(" A") and not rows["g"]["u"].endswith(" 1")


def test_monte_carlo_line_carries_the_display_unit():
    # the Monte Carlo numbers are in the display unit as the linear ones are (pico = 1e-12)
    from budget.text.budget_table import budget_text
    text = SPEC.format(units='[units]\nI = "pA"').replace(
        "enabled = false", 'trials = 2000\nseed = 5\nsampling = "random"')
    out = budget_text(evaluate(parse_spec(text)))
    line = next(ln for ln in out.splitlines() if "Monte Carlo (" in ln)
    assert line.count(" pA") == 3 and "] pA" in line
