"""Certificate honesty: the stated interval is the validated one (JCGM 101 §8), the wording
names the method, and a fixed k states the probability it gives.

Sources:
* JCGM 101:2008 §8 (validation of the law of propagation by the Monte Carlo method) and §5.5 /
  §7.7 (what a Monte Carlo result states: estimate, u, coverage interval).
* Rectangular distribution on [−a, a]: its probabilistically symmetric 95 % interval is
  [−0.95·a, 0.95·a] (the quantiles 0.025 and 0.975 of a uniform; derivation), while y ± 1.96·u
  with u = a/√3 gives ±1.13·a (JCGM 100 §4.3.7 for u = a/√3), so the linear result cannot be
  validated at any usual tolerance.
* P(|t_ν| ≤ k) checked against scipy.stats.t (open reference library), a different code path
  from the scipy.special functions the renderer uses.
* EA-4/02 M:2022 S3: R_X = (10 000.178 ± 0.017) Ω, k = 2; JCGM 101 §9.2.2 (four standard
  normal inputs: u = 2, y ± 1.96·2) for the validated case.
"""

from __future__ import annotations

import re
from dataclasses import replace
from pathlib import Path

from numeric import near
from scipy import stats

from budget import evaluate, load_spec, parse_spec
from budget.report import render_html
from budget.report.statement import stated_result

REFS = Path(__file__).resolve().parents[1] / "budget" / "references"
REFERENCE = REFS / "ea402_s3.toml"
NORMAL = REFS / "jcgm101_additive_normal.toml"

# Y = X1 + X2: X1 rectangular on [-1, 1] (u = 0.577) dominates; X2 normal with u = 0.01 adds
# (0.01/0.577)² = 0.03 % to u_c², too little to move the 95 % end points by 0.005
RECT_SPEC = """
[budget]
title = "rectangular-dominated sum (invented test case)"
[model]
Y = "X1 + X2"
[monte_carlo]
trials = 200000
seed = 11
[inputs.X1]
distribution = "rectangular"
low = -1.0
high = 1.0
[inputs.X2]
value = 0.0
standard_uncertainty = 0.01
"""

FIXED_K_SPEC = """
[budget]
title = "fixed k with few degrees of freedom (invented test case)"
coverage_factor = 2
[model]
Y = "A + B"
[monte_carlo]
trials = 20000
seed = 5
[inputs.A]
value = 1.0
standard_uncertainty = 0.1
dof = 3
[inputs.B]
value = 0.0
standard_uncertainty = 0.001
"""


def _text(html: str) -> str:
    return " ".join(re.sub(r"<[^>]+>", " ", html).split())


def _budget(tmp_path, text, name="spec.toml"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return evaluate(load_spec(p))


def test_rectangular_certificate_states_the_monte_carlo_interval(tmp_path):
    b = _budget(tmp_path, RECT_SPEC)
    mc = b.mc("Y")
    assert mc is not None and not mc.validated          # ±1.13 against ±0.95: JCGM 101 §8
    s = stated_result(b, b.measurand("Y"))
    assert s.method == "JCGM 101" and s.k == "–"
    lo, hi = (float(x.replace("\u2212", "-")) for x in s.interval.strip("[]").split(","))
    # the truth ±0.95 (uniform quantiles) lies within the rounding (0.01) of the stated ends
    assert lo == near(-0.95, abs=0.011) and hi == near(0.95, abs=0.011)
    text = _text(render_html(b, certificate=True, figures=False))
    assert f"{s.interval}" in text and "Monte Carlo method of JCGM 101:2008" in text
    assert "normal distribution" not in text            # it does not hold here
    assert "± 1.1" not in text                           # the unvalidated y ± U is not stated
    # the report leads with the same validated statement
    assert s.line in _text(render_html(b, figures=False))


def test_fixed_k_states_the_probability_k_gives(tmp_path):
    b = _budget(tmp_path, FIXED_K_SPEC.replace("seed = 5", "seed = 5\nenabled = false"))
    assert not b.monte_carlo
    m = b.measurand("Y")
    assert m.coverage_factor == 2.0 and 3 <= m.effective_dof < 3.01
    p = 2 * stats.t.cdf(2.0, m.effective_dof) - 1        # ≈ 0.861 for ν = 3 (t table)
    s = stated_result(b, m)
    assert s.method == "JCGM 100" and s.probability == f"{100 * p:.3g} %"
    text = _text(render_html(b, certificate=True, figures=False))
    assert f"P(|t_ν| ≤ k) = {100 * p:.3g} %" in text
    results = text.split("Results", 1)[1].split("Method", 1)[0]
    assert "95 %" not in results and f"{100 * p:.3g} %" in results


def test_fixed_k_not_validated_states_the_monte_carlo_interval(tmp_path):
    # k = 2 against t_0.975(3) = 3.18 (t table): ±0.20 against ±0.32, far beyond δ = 0.005
    b = _budget(tmp_path, FIXED_K_SPEC)
    assert not b.mc("Y").validated
    s = stated_result(b, b.measurand("Y"))
    assert s.method == "JCGM 101" and s.probability == "95 %"
    lo, hi = (float(x.replace("\u2212", "-")) for x in s.interval.strip("[]").split(","))
    assert hi - lo == near(2 * 3.182 * 0.1, rel=0.05)   # t_0.975(3) = 3.182


def test_ea402_s3_is_not_validated_at_two_digits(tmp_path):
    # EA-4/02 S3 is dominated by rectangular and triangular terms (half of u_c² from dR_D):
    # at n_dig = 2 (δ = 0.00005 Ω for u = 0.0083 Ω, JCGM 101 §7.9.2) the end points differ by
    # about 0.0004 Ω, so the certificate states the Monte Carlo interval, while the report
    # still shows the published EA-4/02 result beside it, marked as not validated
    b = _budget(tmp_path, REFERENCE.read_text(encoding="utf-8"))
    assert not b.mc("R_X").validated
    s = stated_result(b, b.measurand("R_X"))
    assert s.method == "JCGM 101"
    assert "R_X = (10000.178 ± 0.017) Ω" in s.linear_note                  # EA-4/02 S3
    cert = _text(render_html(b, certificate=True, figures=False))
    assert "(10000.178 ± 0.017)" not in cert and s.interval in cert
    assert "R_X = (10000.178 ± 0.017) Ω" in _text(render_html(b, figures=False))


def test_validated_normal_keeps_the_normal_wording(tmp_path):
    # JCGM 101 §9.2.2: four standard normal inputs, the law of propagation is validated
    text = NORMAL.read_text(encoding="utf-8").replace("trials = 1000000", "trials = 100000")
    b = _budget(tmp_path, text)
    assert b.mc("Y").validated
    s = stated_result(b, b.measurand("Y"))
    # ±1.96·2 = 3.92; y = 0 to the place of U's last digit (JCGM 100 §7.2.6): 0.0
    assert s.method == "JCGM 100" and s.line == "Y = (0.0 ± 3.9)"
    assert "normal distribution" in s.statement and "validates this interval" in s.statement


def test_without_monte_carlo_the_normal_is_an_assumption(tmp_path):
    b = _budget(tmp_path, RECT_SPEC.replace("seed = 11", "seed = 11\nenabled = false"))
    assert not b.monte_carlo
    s = stated_result(b, b.measurand("Y"))
    assert s.method == "JCGM 100" and "did not check" in s.statement


# ISO/IEC 17025:2017 §7.8.2.1 n and p, §7.8.6 (clause letters from memory)
def _certificate_text(report: dict) -> str:
    from budget.report import render_html
    b = evaluate(parse_spec('[budget]\ntitle = "17025 fields (invented)"\n[model]\nY = "A"\n'
                            '[inputs.A]\nvalue = 1\nstandard_uncertainty = 0.1\n'),
                 monte_carlo_enabled=False)
    b = replace(b, run={**b.run, "report": report})
    return render_html(b, certificate=True, figures=False)


def test_certificate_names_deviations_and_external_providers():
    html = _certificate_text({"deviations": "none (invented)",
                              "external_providers": "frequency comparison by a partner "
                              "laboratory (invented)"})
    assert "Deviations from, additions to or exclusions from the method" in html
    assert "none (invented)" in html and "partner laboratory (invented)" in html
    missing = _certificate_text({})
    assert "(7.8.2.1 n)" in missing and "(7.8.2.1 p)" in missing


def test_conformity_only_with_a_decision_rule():
    with_rule = _certificate_text({"conformity": "within the specification (invented)",
                                   "decision_rule": "simple acceptance, ILAC-G8 (invented)"})
    assert "Statement of conformity" in with_rule and "within the specification" in with_rule
    alone = _certificate_text({"conformity": "within the specification (invented)"})
    assert "within the specification" not in alone
    assert "no decision rule" in alone
