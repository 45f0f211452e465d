"""``budget explain`` for auditors (issue 13 item 5): digits chosen from the uncertainty, no raw
None/True/False, the what-ifs "recalibrate X to u = …" and "measure T hours longer", and two
budgets side by side (--against).

Sources:

* JCGM 100:2008 §7.2.6: an uncertainty to (at most) two significant digits and the estimate
  to the same decimal place — so a ratio 1.0000003359 with u = 5.9·10⁻⁹ shows its 10th
  decimal.
* JCGM 100:2008 eq. (10), uncorrelated inputs with c = 1: u_c² = Σ u_i²; with u_a = 0.3 and
  u_b = 0.4, u_c = 0.5 (the 3-4-5 triangle, exact by hand).
* JCGM 100:2008 §4.2.3: the standard uncertainty of a mean of n independent observations is
  s/√n, so n → 2n divides it by √2 (white noise; the cycles module's "white" method).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from evidence_helpers import write_spec_folder
from numeric import near

from budget import cli
from budget.engine import evaluate
from budget.errors import UsageError
from budget.explain_diff import diff_budgets
from budget.explain_whatif import measured_longer, recalibrated
from budget.spec import load_spec, parse_spec
from budget.text.explain_text import diagnostic_lines, percent_change, plain, with_u

TYPED = """
[budget]
title = "Three-four-five (invented numbers)"
[model]
y = "a + b"
[monte_carlo]
enabled = false
[inputs.a]
value = 1.0
standard_uncertainty = 0.3
[inputs.b]
value = 2.0
standard_uncertainty = 0.4
"""


def test_digits_follow_the_uncertainty():
    assert with_u(1.0000003359, 5.9e-9) == "1.0000003359"     # JCGM 100 §7.2.6
    assert with_u(10000.178, 0.0085) == "10000.1780"           # u's 2nd digit at 1e-4
    assert with_u(4.11826e-7, 8.07e-10) == "4.1183e-07"        # small: in powers of ten
    assert with_u(1.0000003359, None) == "1.000000336"         # no u: ten digits


def test_no_raw_none_or_booleans():
    assert plain(None) == "not computed" and plain(True) == "yes" and plain(False) == "no"
    lines = diagnostic_lines({"fit": {"chi2": None, "weighted": False, "inflated": True,
                                      "params": [1.0000003359, 0.5], "std_errors": [5.9e-9, 0.1],
                                      "u_ratio": 5.89288e-9}})
    text = "\n".join(lines)
    assert "None" not in text and "True" not in text and "False" not in text
    assert "fit.params: 1.0000003359, 0.50" in text
    assert "fit.u_ratio: 5.9e-09" in text          # an uncertainty: two significant digits
    full = "\n".join(diagnostic_lines({"x": 0.1 + 0.2}, full=True))
    assert "0.30000000000000004" in full           # --full: every digit (repr)


def test_percent_change_shows_small_changes():
    assert percent_change(-4.9e-5) == "−0.0049 %"
    assert percent_change(0.0) == "unchanged"
    assert percent_change(0.25) == "+25.0 %"


def test_recalibrate_against_root_sum_square():
    b = evaluate(parse_spec(TYPED))
    m = b.measurand("y")
    assert m.standard_uncertainty == near(0.5, rel=1e-12)
    s = recalibrated(b, m, "a", 0.0)
    assert s.result.standard_uncertainty == near(0.4, rel=1e-12)   # only u_b left
    s = recalibrated(b, m, "b", 0.3)
    assert s.result.standard_uncertainty == near(math.sqrt(0.18), rel=1e-12)
    with pytest.raises(UsageError, match="did you mean 'a'"):
        recalibrated(b, m, "aa", 0.1)
    with pytest.raises(UsageError, match="--longer needs a Type A row"):
        measured_longer(b, m, 5.0)


@pytest.fixture(scope="module")
def chain_record():
    # the invented resistor-chain example: a 10 h on/off record with its noise analysis
    spec = Path(__file__).resolve().parent.parent / "worked_examples" / "resistor_chain" / \
        "spec.toml"
    return evaluate(load_spec(spec), monte_carlo_enabled=False)


def test_longer_halves_the_white_variance(chain_record):
    b = chain_record
    m = b.measurand("I")
    d = b.run["modules"]["dV"]["diagnostics"]
    n, period = d["cycles_used"], d["cycle_period_s"]
    hours = n * period / 3600.0                      # as long again: N' = 2N
    white, *rest = measured_longer(b, m, hours)
    t = m.term("dV")
    # JCGM 100 §4.2.3: u(mean) ∝ 1/√n; the other rows unchanged (no input correlations here)
    assert b.run["input_correlations"] == []
    others = sum((x.sensitivity * x.standard_uncertainty) ** 2 for x in m.terms if x is not t)
    expected = math.sqrt(others + (t.sensitivity * t.standard_uncertainty) ** 2 / 2)
    assert white.result.standard_uncertainty / m.standard_uncertainty == \
        near(expected / m.standard_uncertainty, rel=1e-9)
    assert rest and "floor" in rest[0].result.label
    # a floor can only slow the fall of u
    assert rest[0].result.standard_uncertainty >= white.result.standard_uncertainty


def test_against_side_by_side(tmp_path, capsys):
    a = evaluate(parse_spec(TYPED))
    other = TYPED.replace("standard_uncertainty = 0.4", "standard_uncertainty = 0.3").replace(
        'y = "a + b"', 'y = "a + b + c"') + "[inputs.c]\nvalue = 0.0\nstandard_uncertainty = 0.1\n"
    b = evaluate(parse_spec(other))
    d = diff_budgets(a, b)
    rows = {t.name: t for t in d.measurands[0].terms}
    assert rows["b"].share_a == near(0.16 / 0.25, rel=1e-12)       # 0.4²/0.5²
    assert rows["b"].share_b == near(0.09 / 0.19, rel=1e-12)       # 0.3²/(0.3²+0.3²+0.1²)
    assert rows["c"].contribution_a is None and rows["c"].change == "only in the other"
    (tmp_path / "a.json").write_text(a.to_json(), encoding="utf-8")
    (tmp_path / "b.json").write_text(b.to_json(), encoding="utf-8")
    assert cli.main(["explain", "--record", str(tmp_path / "a.json"), "--against",
                     str(tmp_path / "b.json"), "--recalibrate", "a=0.1",
                     "--json", str(tmp_path / "out.json")]) == 0
    out = capsys.readouterr().out
    assert "Budget side by side" in out and "only in the other" in out
    assert "a recalibrated to u = 0.1" in out
    saved = json.loads((tmp_path / "out.json").read_text(encoding="utf-8"))
    assert saved["scenarios"][0]["standard_uncertainty"] == near(math.sqrt(0.01 + 0.16),
                                                                 rel=1e-12)
    assert saved["against"]["measurands"][0]["terms"]


def test_explain_term_of_a_module_shows_no_raw_values(tmp_path, capsys):
    spec = write_spec_folder(tmp_path / "lab")
    assert cli.main(["explain", str(spec), "g"]) == 0
    out = capsys.readouterr().out
    diag = out[out.index("Module 'voltmeter'"):]
    for raw in ("None", "True", "False"):
        assert f": {raw}" not in diag
