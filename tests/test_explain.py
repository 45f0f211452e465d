"""Tests of ``budget explain`` (budget/explain.py and its CLI command).

References
----------
* A small model Y = a·b/c + d² whose partial derivatives are written out by hand beside the
  checks (elementary calculus), with the law of propagation JCGM 100 eq. (16) (correlated inputs),
  Welch–Satterthwaite JCGM 100 eq. (G.2b), u = a/√3 for a rectangular half-width a (JCGM 100
  §4.3.7) and k = t_0.975(ν) from scipy.stats.t (an open reference library that reproduces JCGM
  100 Table G.2).
* EA-4/02 M:2022 supplement S3 (calibration of a 10 kΩ standard resistor): inputs and published
  u = 8.3 mΩ, U = 0.017 Ω (k = 2), as listed in /work/shared/REFERENCES.md.
* JCGM 100:2008 Annex H.2: published u(R) = 0.071 Ω (memory, recomputes; see REFERENCES.md).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from numeric import near
from scipy import stats

from budget.cli import main
from budget.engine import evaluate
from budget.errors import DataError, UsageError
from budget.explain import combine_terms, explain_term, overview
from budget.record import load_record, record_from_dict
from budget.spec import load_spec, parse_spec

ROOT = Path(__file__).resolve().parents[1]
REFS = ROOT / "budget" / "references"

SPEC = """
[budget]
title = "explain check: Y = a*b/c + d**2"
coverage_probability = 0.95

[model]
Y = "a * b / c + d**2"

[monte_carlo]
enabled = false

[inputs.a]
description = "factor a"
value = 2.0
standard_uncertainty = 0.1
dof = 10

[inputs.b]
value = 3.0
standard_uncertainty = 0.2

[inputs.c]
value = 4.0
distribution = "rectangular"
half_width = 0.5

[inputs.d]
value = 1.0
standard_uncertainty = 0.05
dof = 5
evaluation = "A"

[correlations]
pairs = [["a", "b", 0.5]]
"""

# Hand derivation at a = 2, b = 3, c = 4, d = 1:
#   ∂Y/∂a = b/c = 0.75        ∂Y/∂b = a/c = 0.5
#   ∂Y/∂c = −a·b/c² = −6/16 = −0.375        ∂Y/∂d = 2d = 2
C = {"a": 0.75, "b": 0.5, "c": -0.375, "d": 2.0}
# u(c) = 0.5/√3 (rectangular half-width, JCGM 100 §4.3.7)
U = {"a": 0.1, "b": 0.2, "c": 0.5 / math.sqrt(3), "d": 0.05}
# contributions c·u: a 0.075, b 0.1, c −0.375·0.288675 = −0.108253, d 0.1
# u_c² = 0.075² + 0.1² + 2·0.5·0.075·0.1 + 0.375²·0.25/3 + 0.1²
#      = 0.005625 + 0.01 + 0.0075 + 0.01171875 + 0.01 = 0.04484375
VAR = 0.04484375
# ν_eff by the correlated Welch–Satterthwaite of budget.propagate.lpu (derived there; G.2b for
# r = I): each input's weight is its part of u_c², w_i = (c_i u_i)·Σ_j r_ij (c_j u_j), over ν_i.
#   w_a = 0.075·(0.075 + 0.5·0.1) = 0.009375 (ν = 10); b has ν = ∞, c has ν = ∞;
#   w_d = 0.1² = 0.01 (ν = 5)
#   ν_eff = 0.04484375² / (0.009375²/10 + 0.01²/5) = 69.8516 -> floor 69
W_A = 0.075 * (0.075 + 0.5 * 0.1)             # = 0.009375
NU = VAR ** 2 / (W_A ** 2 / 10 + 0.01 ** 2 / 5)

def k95(nu: float) -> float:
    """k = t_0.975(floor ν) (JCGM 100 G.4.1 note 1: truncation); scipy.stats.t as reference."""
    return float(stats.norm.ppf(0.975)) if math.isinf(nu) else float(
        stats.t.ppf(0.975, math.floor(nu)))


@pytest.fixture(scope="module")
def budget():
    return evaluate(parse_spec(SPEC), monte_carlo_enabled=False)


def test_hand_numbers_of_the_model(budget):
    m = budget.measurand("Y")
    assert m.value == near(2.5, rel=1e-12)        # 2·3/4 + 1² = 2.5
    assert m.standard_uncertainty == near(math.sqrt(VAR), rel=1e-12)
    assert NU == near(69.85159, abs=1e-5)
    assert m.effective_dof == near(NU, rel=1e-12)
    assert m.coverage_factor == near(k95(NU), rel=1e-12)


def test_each_term_answer_has_the_hand_derivative(budget):
    for name, c in C.items():
        (a,) = explain_term(budget, name).answers
        assert a.term.sensitivity == near(c, rel=1e-12)
        # the written-out derivative, parsed and evaluated at the estimates, gives the same
        assert a.derivative_value == near(c, rel=1e-12)
        assert a.signed_contribution == near(c * U[name], rel=1e-12)
        assert a.cautions == ()
        assert a.model == (("Y", "a * b / c + d**2"),)
    # the derivative text names exactly the inputs the hand derivative uses (−a·b/c²)
    words = explain_term(budget, "c").answers[0].derivative
    for ch in "()*/-+":
        words = words.replace(ch, " ")
    assert {w for w in words.split() if not w[0].isdigit()} == {"a", "b", "c"}
    a = explain_term(budget, "a").answers[0]
    assert a.description == "factor a"
    assert a.correlations == (("b", 0.5),)
    d = explain_term(budget, "d").answers[0]
    assert d.term.evaluation == "A" and d.term.dof == 5
    cc = explain_term(budget, "c").answers[0]
    # bounds of the rectangular distribution: 4 ± 0.5
    assert (cc.distribution["low"], cc.distribution["high"]) == (3.5, 4.5)
    assert "rectangular" in cc.distribution_reason


def test_shares_and_overview_order(budget):
    # share_i = (c_i u_i)·Σ_j r_ij (c_j u_j) / u_c²:
    #   a: 0.075·(0.075 + 0.5·0.1) = 0.009375     b: 0.1·(0.1 + 0.5·0.075) = 0.01375
    #   c: 0.01171875                              d: 0.01
    share = {"a": 0.009375 / VAR, "b": 0.01375 / VAR, "c": 0.01171875 / VAR, "d": 0.01 / VAR}
    ov = overview(budget)
    rows = ov.measurands[0].rows
    assert [r.term.name for r in rows] == ["b", "c", "d", "a"]     # largest share first
    for r in rows:
        assert r.term.variance_share == near(share[r.term.name], rel=1e-12)
    assert sum(share.values()) == near(1.0, rel=1e-12)


def _what_if(var: float, denom: float) -> float:
    """U = k·u_c with ν = u_c⁴/denom and k = t_0.975(floor ν) (∞ when denom = 0)."""
    nu = var ** 2 / denom if denom > 0 else math.inf
    return k95(nu) * math.sqrt(var)


def test_what_if_lines_by_hand(budget):
    m = budget.measurand("Y")
    # d halved: its contribution 0.1 -> 0.05, variance 0.01 -> 0.0025
    var = VAR - 0.01 + 0.0025                                        # 0.03734375
    u_half = _what_if(var, W_A ** 2 / 10 + 0.0025 ** 2 / 5)
    # d removed: variance 0.04484375 − 0.01 = 0.03484375; only a (w_a, ν = 10) has finite ν
    u_gone = _what_if(VAR - 0.01, W_A ** 2 / 10)
    now, half, gone = explain_term(budget, "d").answers[0].what_if
    assert now.expanded_uncertainty == near(m.expanded_uncertainty, rel=1e-12)
    assert half.expanded_uncertainty == near(u_half, rel=1e-12)
    assert gone.expanded_uncertainty == near(u_gone, rel=1e-12)
    assert half.relative_change == near(u_half / m.expanded_uncertainty - 1, rel=1e-12)

    # a removed: only d's ν = 5 counts: variance 0.01 + 0.01171875 + 0.01 = 0.03171875
    gone_a = explain_term(budget, "a").answers[0].what_if[2]
    assert gone_a.standard_uncertainty == near(math.sqrt(0.03171875), rel=1e-12)
    assert gone_a.effective_dof == near(0.03171875 ** 2 / (0.01 ** 2 / 5), rel=1e-12)
    assert gone_a.expanded_uncertainty == near(_what_if(0.03171875, 0.01 ** 2 / 5),
                                                        rel=1e-12)
    # a halved: u_c² part of a and b 0.0375² + 0.1² + 2·0.5·0.0375·0.1 = 0.01515625; a's own
    # weight w_a = 0.0375·(0.0375 + 0.5·0.1) = 0.00328125 (ν = 10)
    g = 0.0375 ** 2 + 0.01 + 2 * 0.5 * 0.0375 * 0.1
    w_a = 0.0375 * (0.0375 + 0.5 * 0.1)
    half_a = explain_term(budget, "a").answers[0].what_if[1]
    var_a = g + 0.01171875 + 0.01
    assert half_a.expanded_uncertainty == near(
        _what_if(var_a, w_a ** 2 / 10 + 0.01 ** 2 / 5), rel=1e-12)


def test_the_record_gives_the_same_answer(budget, tmp_path):
    p = tmp_path / "r.json"
    p.write_text(budget.to_json(), encoding="utf-8")
    again = load_record(p)
    for name in C:
        a1 = explain_term(budget, name).to_dict()
        a2 = explain_term(again, name).to_dict()
        assert a1 == a2


def test_module_diagnostics_come_from_the_owning_module(budget):
    # A record whose input 'b' came from a module (the record format of budget/engine.py:
    # run.modules = {NAME: {module, expression, quantities, diagnostics}}).
    d = budget.to_dict()
    d["run"]["modules"] = {"B": {"module": "resistor", "expression": "b * 1",
                                 "quantities": ["b"],
                                 "diagnostics": {"birge_ratio": 1.25,
                                                 "figures": [{"id": "drift", "title": "drift",
                                                              "series": []}]}}}
    b2 = record_from_dict(d)
    (a,) = explain_term(b2, "b").answers
    assert (a.module_input, a.module_kind, a.module_expression) == ("B", "resistor", "b * 1")
    assert a.diagnostics == {"birge_ratio": 1.25, "figures": [{"id": "drift", "title": "drift"}]}
    # naming the module's input explains each of its rows
    assert [x.term.name for x in explain_term(b2, "B").answers] == ["b"]


def test_unknown_and_rowless_terms(budget):
    with pytest.raises(UsageError, match="did you mean 'd'"):
        explain_term(budget, "dd")
    with pytest.raises(UsageError, match="no measurand"):
        explain_term(budget, "a", measurand="Q")
    b = evaluate(parse_spec(SPEC.replace("[inputs.d]", "[inputs.k0]\nvalue = 1.0\n"
                                         "standard_uncertainty = 0.0\n\n[inputs.d]")),
                 monte_carlo_enabled=False)
    with pytest.raises(UsageError, match="constant"):
        explain_term(b, "k0")


def test_inconsistent_record_is_flagged(budget):
    d = budget.to_dict()
    d["measurands"][0]["terms"][0]["sensitivity"] *= 1.01      # tampered coefficient
    (a,) = explain_term(record_from_dict(d), d["measurands"][0]["terms"][0]["name"]).answers
    assert any("inconsistent" in c for c in a.cautions)
    assert any("recomputed" in c for c in a.cautions)


# --------------------------------------------------------------------------- published examples
def test_ea402_s3_what_if_by_hand():
    b = evaluate(load_spec(REFS / "ea402_s3.toml"), monte_carlo_enabled=False)
    m = b.measurand("R_X")
    s = 10000.053 + 0.020 + 0.0       # R_S + δR_D + δR_TS (EA-4/02 S3 inputs)
    r = 1.0000105
    # ∂R_X/∂R_S = ∂R_X/∂δR_D = ∂R_X/∂δR_TS = r_C·r = 1.0000105 (r_C = 1)
    parts = {"R_S": (r * 0.0025) ** 2,                  # certificate U = 5 mΩ, k = 2
             "dR_D": r ** 2 * 0.010 ** 2 / 3,            # rectangular ±10 mΩ
             "dR_TS": r ** 2 * 0.00275 ** 2 / 3,         # rectangular ±2.75 mΩ
             "r_C": (s * r * 1e-6) ** 2 / 6,             # triangular ±1e-6: u = a/√6; c = s·r
             "r": (s * 1.0 * 0.07e-6) ** 2,              # c = s·r_C, u = 0.07e-6
             "dR_TX": 0.0055 ** 2 / 3}                   # rectangular ±5.5 mΩ, c = −1
    var = sum(parts.values())
    assert math.sqrt(var) == near(0.0083, abs=0.00005)    # published u = 8.3 mΩ
    assert m.expanded_uncertainty == near(0.017, abs=0.0005)  # published U, k = 2
    # The engine's u_c² agrees with this hand sum to ~1e-11 relative: the triangular bounds of
    # r_C are the floats 1 ∓ 1e-6, whose difference carries a rounding of ~1e-16/2e-6 ≈ 1e-10
    # relative (derivation), so 1e-9 is the honest demand. The what-if checks below start from
    # the record's u_c² and take out the hand-computed part of δR_D only.
    assert m.standard_uncertainty ** 2 == near(var, rel=1e-9)
    var = m.standard_uncertainty ** 2
    k = float(stats.norm.ppf((1 + 0.9545) / 2))        # ν = ∞: the normal quantile, ≈ 2.000
    (a,) = explain_term(b, "dR_D").answers
    now, half, gone = a.what_if
    assert half.expanded_uncertainty == near(
        k * math.sqrt(var - parts["dR_D"] * 0.75), rel=1e-9)    # (u/2)² = u²/4
    assert gone.expanded_uncertainty == near(k * math.sqrt(var - parts["dR_D"]),
                                                      rel=1e-9)
    assert a.term.variance_share == near(parts["dR_D"] / var, rel=1e-9)


@pytest.mark.parametrize("spec", [REFS / "gum_h2.toml", REFS / "ea402_s3.toml",
                                  ROOT / "worked_examples" / "typed_in_budget" / "spec.toml"])
def test_every_term_of_the_worked_examples_is_answered(spec):
    b = evaluate(load_spec(spec), monte_carlo_enabled=False)
    for m in b.measurands:
        for t in m.terms:
            answers = explain_term(b, t.name, m.name).answers
            assert len(answers) == 1
            # the recomputation from the terms reproduces the engine's u_c, ν_eff and k and
            # the written-out derivative its coefficient: no caution
            assert answers[0].cautions == ()
    if spec.name == "gum_h2.toml":
        # GUM H.2 published u(R) = 0.071 Ω (REFERENCES.md), recomputed from the terms with the
        # observed correlations
        assert combine_terms(b, b.measurand("R")).standard_uncertainty == near(
            0.071, abs=0.0005)


# --------------------------------------------------------------------------- CLI
def _spec_file(tmp_path: Path) -> Path:
    p = tmp_path / "y.toml"
    p.write_text(SPEC, encoding="utf-8")
    return p


def test_cli_overview_and_term(tmp_path, capsys):
    spec = _spec_file(tmp_path)
    assert main(["explain", str(spec)]) == 0
    out = capsys.readouterr().out
    order = [out.index(f"\n{n} ") for n in ("b", "c", "d", "a")]
    assert order == sorted(order)                       # sorted by share, largest first
    out_json = tmp_path / "d.json"
    assert main(["explain", str(spec), "d", "--json", str(out_json)]) == 0
    out = capsys.readouterr().out
    for section in ("What it is", "Estimate", "Std uncertainty", "Distribution",
                    "Degrees of freedom", "Sensitivity", "Contribution", "Evaluation", "Source",
                    "Module diagnostics", "What if"):
        assert section in out
    assert "∂Y/∂d" in out and "d removed" in out and "u(d) halved" in out
    assert max(len(ln) for ln in out.splitlines()) <= 100
    data = json.loads(out_json.read_text(encoding="utf-8"))
    assert data["answers"][0]["term"]["sensitivity"] == near(2.0)   # ∂Y/∂d = 2d


def test_cli_record(tmp_path, capsys):
    rec = tmp_path / "r.json"
    assert main(["run", str(_spec_file(tmp_path)), "--json", str(rec)]) == 0
    capsys.readouterr()
    assert main(["explain", "--record", str(rec), "c"]) == 0
    assert "∂Y/∂c" in capsys.readouterr().out


def _one_error_line(capsys) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "Traceback" not in err[0]
    return err[0]


def test_cli_bad_input(tmp_path, capsys):
    spec = _spec_file(tmp_path)
    assert main(["explain", str(spec), "aa"]) == 2
    assert "did you mean 'a'" in _one_error_line(capsys)
    bad = tmp_path / "bad.json"
    bad.write_text('{"schema": "qcs-budget/record-1",\n "measurands": [}', encoding="utf-8")
    assert main(["explain", "--record", str(bad)]) == 2
    line = _one_error_line(capsys)
    assert "bad.json:2" in line and "JSON" in line
    assert main(["explain", "--record", str(tmp_path / "missing.json")]) == 2
    assert "not found" in _one_error_line(capsys)
    assert main(["explain", str(tmp_path / "missing.toml")]) == 2
    assert "not found" in _one_error_line(capsys)
    assert main(["explain"]) == 2
    _one_error_line(capsys)
    nan = tmp_path / "nan.json"
    d = json.loads(evaluate(parse_spec(SPEC), monte_carlo_enabled=False).to_json())
    d["measurands"][0]["terms"][1]["sensitivity"] = "x"
    nan.write_text(json.dumps(d), encoding="utf-8")
    assert main(["explain", "--record", str(nan)]) == 2
    assert "measurands[0].terms[1].sensitivity" in _one_error_line(capsys)
    assert main(["explain", "--record", str(nan), str(spec), "a"]) == 2
    _one_error_line(capsys)


def test_record_errors_are_data_errors(tmp_path):
    p = tmp_path / "x.json"
    p.write_text('{"schema": "other"}', encoding="utf-8")
    with pytest.raises(DataError, match="schema"):
        load_record(p)
    p.write_text('{"schema": "qcs-budget/record-1", "measurands": [{"value": NaN}]}',
                 encoding="utf-8")
    with pytest.raises(DataError):
        load_record(p)
