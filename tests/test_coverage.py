"""Coverage factor ↔ degrees of freedom (issue 11, items 2, 4, 6 and 7 for typed-in inputs).

Oracles: JCGM 100:2008 Table G.2 (k = t_p(ν)), scipy.stats.t (an open reference library for the
Student-t quantile and distribution function) and scipy.stats.triang (triangular moments).
"""

from __future__ import annotations

import math
import textwrap
from pathlib import Path

import pytest
from numeric import near
from scipy import stats

from budget import evaluate
from budget.coverage import coverage_probability_of, describe_inference, dof_from_coverage_factor
from budget.errors import BudgetError, SpecError
from budget.inputs import InputContext, run_module
from budget.spec import parse_spec


def spec_of(text: str):
    return parse_spec(textwrap.dedent(text), file="spec.toml")


@pytest.mark.parametrize("nu", [1.0, 1.5, 3.7, 10.0, 60.0, 250.0])
def test_round_trip_with_scipy_t(nu):
    # scipy.stats.t.ppf is the oracle for t_p(ν); the inverse must give ν back
    for p in (0.95, 0.9545, 0.99):
        k = stats.t.ppf((1 + p) / 2, nu)
        if k - stats.norm.ppf((1 + p) / 2) <= 0.005:
            continue                     # within the rounding band: ν = ∞ by rule (see below)
        assert dof_from_coverage_factor(k, p) == near(nu, rel=1e-8)


@pytest.mark.parametrize("nu,k", [(1, 13.97), (2, 4.53), (3, 3.31), (4, 2.87), (5, 2.65),
                                  (6, 2.52), (7, 2.43), (8, 2.37), (9, 2.32), (10, 2.28)])
def test_table_g2_factors_give_their_dof(nu, k):
    # JCGM 100 Table G.2, p = 95.45 %: the published (rounded) k gives back its integer ν
    # exactly (review finding: 2.87 used to give 3.998, truncated to 3 by G.6.4)
    assert dof_from_coverage_factor(k, 0.9545) == nu


def test_table_g2_k_at_95_percent_gives_its_integer_dof():
    # JCGM 100 Table G.2, p = 95 %: t = 2.78 for ν = 4, 2.57 for ν = 5, 2.23 for ν = 10
    assert [dof_from_coverage_factor(k, 0.95) for k in (2.78, 2.57, 2.23)] == [4.0, 5.0, 10.0]


def test_passed_through_certificate_keeps_its_u(tmp_path):
    # Y = X with U = 0.287, k = 2.87 at 95.45 %: ν = 4 (Table G.2), so k_95(4) = 2.776 and
    # U(Y) = 2.776·0.1 = 0.278 (JCGM 100 Table G.2 at 95 %, t_0.975(4) = 2.7764)
    from budget.engine import evaluate
    spec = spec_of("""
        [budget]
        title = "passed through (invented)"
        [model]
        Y = "X"
        [monte_carlo]
        enabled = false
        [inputs.X]
        value = 10.0
        expanded_uncertainty = 0.287
        coverage_factor = 2.87
        coverage_probability = 0.9545
        """)
    (m,) = evaluate(spec).measurands
    assert m.effective_dof == 4.0
    assert m.expanded_uncertainty == near(0.27764, abs=5e-5)


def test_issue_case_k_287_at_95_percent():
    # issue 11 item 2: k = 2.87 stated for 95 % → ν = 3.7; scipy.stats.t.ppf(0.975, 3.6927) = 2.87
    nu = dof_from_coverage_factor(2.87, 0.95)
    assert nu == near(3.69, abs=0.005)
    assert stats.t.ppf(0.975, nu) == near(2.87, rel=1e-9)


def test_normal_quantiles_give_infinite_dof_and_small_k_is_refused():
    # k = 2 for 95.45 % and k = 1.96 for 95 % are the normal quantiles (JCGM 100 Table G.2, ν = ∞)
    assert math.isinf(dof_from_coverage_factor(2.0, 0.9545))
    assert math.isinf(dof_from_coverage_factor(1.96, 0.95))
    # k = 2 stated for 95 %: t_0.975(ν) = 2 at ν = 60.4; t_0.975(60) = 2.0003 (scipy.stats.t.ppf)
    # states 2.00 to its digits, so the integer 60 is taken
    assert dof_from_coverage_factor(2.0, 0.95) == 60.0
    assert stats.t.ppf(0.975, 60) == near(2.0003, abs=5e-5)
    with pytest.raises(BudgetError, match="normal quantile"):
        dof_from_coverage_factor(1.65, 0.95)          # 1.65 is a 90 % normal factor
    with pytest.raises(BudgetError, match="below 1"):
        dof_from_coverage_factor(0.9, 0.5)            # refused whatever p (issue 11 item 6)


def test_coverage_probability_of_a_fixed_k():
    # issue 11 item 7 (EA-4/02 M:2022 §5, memory): P(|t_3| ≤ 2) ≈ 0.86; oracle scipy.stats.t.cdf
    assert coverage_probability_of(2.0, 3) == near(2 * stats.t.cdf(2.0, 3) - 1,
                                                            rel=1e-12)
    assert coverage_probability_of(2.0, 3) == near(0.861, abs=5e-4)
    assert coverage_probability_of(2.0, math.inf) == near(0.9545, abs=5e-5)


CERT = """
    [budget]
    dof_rounding = "interpolate"
    [model]
    Y = "X"
    [monte_carlo]
    trials = 400000
    seed = 11
    [inputs.X]
    value = 10.0
    expanded_uncertainty = 0.287
    coverage_factor = 2.87
"""


def test_certificate_u_and_k_keep_their_expanded_uncertainty():
    # issue 11 item 2: Y = X must give back the certificate's own U = 0.287, not 1.96·0.1
    b = evaluate(spec_of(CERT))
    m = b.measurand("Y")
    assert m.effective_dof == near(dof_from_coverage_factor(2.87, 0.95), rel=1e-12)
    assert m.expanded_uncertainty == near(0.287, rel=1e-9)
    prov = b.input("X").provenance
    assert "ν = 3.7 inferred from k = 2.87 at 95 %" in prov.dof_reason
    assert "assumed" in prov.dof_reason                      # p was not stated
    # synthetic truth: the true X is t_ν-distributed about the estimate with scale U/k
    # (JCGM 101 §6.4.9.7); the Monte Carlo interval must be 10 ± 0.287 (scipy.stats.t.ppf)
    mc = b.mc("Y")
    assert mc.interval_low == near(10 - 0.287, abs=0.006)
    assert mc.interval_high == near(10 + 0.287, abs=0.006)


def test_stated_probability_and_explicit_dof():
    text = CERT.replace("coverage_factor = 2.87", "coverage_factor = 2.0\n"
                        "    coverage_probability = 0.9545")
    assert math.isinf(evaluate(spec_of(text), monte_carlo_enabled=False)
                      .measurand("Y").effective_dof)
    text = CERT.replace("coverage_factor = 2.87", "coverage_factor = 2.87\n    dof = 12")
    b = evaluate(spec_of(text), monte_carlo_enabled=False)
    assert b.input("X").dof == 12 and "as stated" in b.input("X").provenance.dof_reason
    text = CERT.replace("coverage_factor = 2.87", "coverage_factor = 2.87\n    dof = 12\n"
                        "    coverage_probability = 0.95")
    with pytest.raises(SpecError) as e:
        evaluate(spec_of(text))
    assert e.value.field == "inputs.X.coverage_probability"


@pytest.mark.parametrize("k,words", [(0.5, "at least 1"), (1.2, "normal quantile")])
def test_small_k_refused_at_its_key(k, words):
    with pytest.raises(SpecError, match=words) as e:
        evaluate(spec_of(CERT.replace("coverage_factor = 2.87", f"coverage_factor = {k}")))
    assert e.value.field == "inputs.X.coverage_factor" and e.value.line is not None


def test_triangular_value_is_the_mode():
    # issue 11 item 4: low = 0, high = 10, value = 2 → estimate (0 + 10 + 2)/3 = 4.0, u = 2.16
    # (scipy.stats.triang with c = 0.2, loc = 0, scale = 10 as the oracle)
    b = evaluate(spec_of("""
        [model]
        Y = "T"
        [monte_carlo]
        enabled = false
        [inputs.T]
        distribution = "triangular"
        low = 0.0
        high = 10.0
        value = 2.0
    """))
    q = b.input("T")
    ref = stats.triang(0.2, loc=0.0, scale=10.0)
    assert q.value == near(ref.mean(), rel=1e-12) and q.value == near(4.0)
    assert q.standard_uncertainty == near(ref.std(), rel=1e-12)
    assert round(q.standard_uncertainty, 2) == 2.16
    assert any("mode" in n and "(a + b + c)/3" in n for n in q.provenance.notes)


def _volt(tmp_path: Path, **table):
    t = {"module": "voltmeter", "gain": 1.0000012, **table}
    return run_module(InputContext(name="g", table=t, folder=tmp_path, spec_file="spec.toml"))


def test_voltmeter_certificate_k_implies_dof(tmp_path):
    (q,) = _volt(tmp_path, gain_expanded_uncertainty=2.87e-7,
                 gain_coverage_factor=2.87).quantities
    # ν from k = 2.87 at 95 % (scipy.stats.t.ppf(0.975, 3.69) = 2.87); sampled as t_ν (§6.4.9.7)
    assert q.dof == near(3.69, abs=0.005) and q.distribution.kind == "student-t"
    assert q.standard_uncertainty == near(1e-7, rel=1e-12)
    assert "inferred from k = 2.87 at 95 %" in q.provenance.dof_reason
    (q,) = _volt(tmp_path, gain_expanded_uncertainty=2e-7, gain_coverage_factor=2,
                 gain_coverage_probability=0.9545).quantities
    assert math.isinf(q.dof)


@pytest.mark.parametrize("table,field", [
    ({"gain_expanded_uncertainty": 1e-7, "gain_coverage_factor": 0.5}, "gain_coverage_factor"),
    ({"gain_uncertainty": 1e-7, "stability": 1.0}, "stability"),
    ({"gain_uncertainty": 1e-7, "gain_coverage_probability": 0.95},
     "gain_coverage_probability"),
])
def test_voltmeter_refusals(tmp_path, table, field):
    with pytest.raises(SpecError) as e:
        _volt(tmp_path, **table)
    assert e.value.field == f"inputs.g.{field}"


FIXED_K = """
    [budget]
    coverage_factor = 2
    [model]
    Y = "A"
    [monte_carlo]
    trials = 400000
    seed = 3
    [inputs.A]
    observations = [1.0, 1.2, 0.9, 1.1]
"""


def test_fixed_k_states_the_probability_it_gives():
    # issue 11 item 7: k = 2 with ν_eff = 3 (n = 4 readings) covers P(|t_3| ≤ 2) = 0.861
    # (scipy.stats.t.cdf; EA-4/02 M:2022 §5 memory), not "approximately 95 %"
    from budget.report.context import coverage_statement
    from budget.text import budget_text
    b = evaluate(spec_of(FIXED_K))
    m = b.measurand("Y")
    assert m.effective_dof == 3 and m.coverage_factor == 2.0
    assert m.coverage_probability_of_k == near(2 * stats.t.cdf(2.0, 3) - 1, rel=1e-12)
    # synthetic truth: the Monte Carlo draws A from t_3 (JCGM 101 §6.4.9), so the fraction of
    # trials inside y ± 2u is P(|t_3| ≤ 2) up to its binomial noise (±0.0017 at 4·10⁵ trials)
    assert b.mc("Y").linear_interval_probability == near(0.8607, abs=0.003)
    text = budget_text(b)
    assert "coverage probability 86.1 % at ν_eff = 3" in text and "about 95" not in text
    sentence = coverage_statement(m, fixed_k=True,
                                  mc_probability=b.mc("Y").linear_interval_probability)
    assert "86.1 %" in sentence and "approximately" not in sentence
    # a derived k keeps the nominal wording: t_0.975(3)·u covers 95 % by construction
    free = evaluate(spec_of(FIXED_K.replace("coverage_factor = 2", "")),
                    monte_carlo_enabled=False).measurand("Y")
    assert free.coverage_probability_of_k == near(0.95, rel=1e-12)


@pytest.mark.parametrize("rounding,k", [("floor", 3.182), ("interpolate", 2.87)])
def test_fractional_nu_truncated_or_interpolated_as_g64_allows(rounding, k):
    # Issue 11 item 2: U = 0.287 with k = 2.87 stated for 95 % implies ν = 3.7. JCGM 100 G.6.4
    # (and G.4.1 note 1; wording from memory) allows truncating a fractional ν_eff to the next
    # lower integer or interpolating in Table G.2. Truncated: k = t_0.975(3) = 3.182 (t tables,
    # NIST TN 1297 Table B.1: 3.18); the fractional ν gives the certificate's own 2.87 back.
    # Either way the note states the other reading, since they differ by more than 1 %.
    b = evaluate(spec_of(f"""
        [budget]
        title = "g64"
        dof_rounding = "{rounding}"
        [model]
        Y = "X"
        [inputs.X]
        value = 1.0
        expanded_uncertainty = 0.287
        coverage_factor = 2.87
        """), monte_carlo_enabled=False)
    m = b.measurands[0]
    assert m.effective_dof == near(3.7, abs=0.05)
    assert m.coverage_factor == near(k, abs=0.0005)
    note = next(n for n in b.run["notes"] if n.startswith("Y: ν_eff = 3.7"))
    assert "G.6.4" in note and ("2.87" in note if rounding == "floor" else "3.18" in note)


def test_inference_text_states_the_t_quantile_and_nu():
    # JCGM 100 Table G.2: t_95.45(4) = 2.87 (table digits); scipy.stats.t gives 2.8693, the
    # four digits the provenance text quotes; t_95(4) = 2.78 (table), 2.7764 (scipy)
    assert f"{stats.t.ppf((1 + 0.9545) / 2, 4):.4f}" == "2.8693"
    text = describe_inference(2.87, 0.9545, 4.0)
    assert "ν = 4 inferred" in text and "t_p(4) = 2.8693" in text, text
    assert "t_p(4) = 2.7764" in describe_inference(2.78, 0.95, 4.0)
    # project convention (display): a fractional ν is shown to one decimal below 100 and to
    # whole units from 100 on; ∞ when k is the normal quantile
    assert "ν = 3.7 inferred" in describe_inference(2.9, 0.95, 3.72)
    assert "ν = 100 inferred" in describe_inference(1.984, 0.95, 100.4)
    assert "ν = 99.6 inferred" in describe_inference(1.984, 0.95, 99.62)
    assert describe_inference(1.96, 0.95, math.inf).startswith("ν = ∞ inferred")
