"""ν_eff with correlated inputs (issue 11 item 1).

Oracles: JCGM 100:2008 eq. (G.2b) (Welch–Satterthwaite, the r = I limit), the exact sampling
distribution of one sample's variance (c^T S c / σ² ~ χ²_{n−1}/(n − 1), common practice of
multivariate statistics), the tool's own Monte Carlo judged by JCGM 101 §8, and a frequentist
simulation with known truth. The rule itself is derived in budget/propagate/lpu.py.
"""

from __future__ import annotations

import math
import textwrap

import numpy as np
from numeric import near
from scipy import stats

from budget import evaluate, load_spec
from budget.propagate.lpu import effective_dof, estimation_groups
from budget.references import spec_path
from budget.spec import parse_spec

OBS_A = [1.02, 0.99, 1.01, 0.98, 1.00]          # invented readings: n = 5, ν = 4


def spec_of(text: str):
    return parse_spec(textwrap.dedent(text), file="spec.toml")


def test_unused_correlated_input_takes_no_part():
    # issue 11 item 1: Y2 = B with A (ν = 4) correlated 0.3 with B (ν = ∞): c_A = 0, so
    # ν_eff(Y2) = ∞ and k = 1.96 (JCGM 100 Table G.2, ν = ∞, p = 95 %), not ν = 4 and k = 2.78
    b = evaluate(spec_of(f"""
        [model]
        Y = "A + B"
        Y2 = "B"
        [monte_carlo]
        enabled = false
        [inputs.A]
        observations = {OBS_A}
        [inputs.B]
        value = 2.0
        standard_uncertainty = 0.05
        [correlations]
        pairs = [["A", "B", 0.3]]
    """))
    m2 = b.measurand("Y2")
    assert math.isinf(m2.effective_dof)
    assert m2.coverage_factor == near(stats.norm.ppf(0.975), rel=1e-12)


TWO = """
    [model]
    Y = "A + B"
    [monte_carlo]
    trials = 1000000
    seed = 2026
    [inputs.A]
    value = 1.0
    standard_uncertainty = 0.01
    dof = 4
    [inputs.B]
    value = 2.0
    standard_uncertainty = 0.1
    [correlations]
    pairs = [["A", "B", R]]
"""


def test_weak_correlation_keeps_the_weight_of_the_small_term():
    # issue 11 item 1: u_A = 0.01 (ν = 4), u_B = 0.1 (ν = ∞). r = 0: G.2b gives
    # ν = 0.0101² / (0.0001²/4) = 40 804 (JCGM 100 eq. G.2b, by hand)
    m0 = evaluate(spec_of(TWO.replace("R]", "0.0]")), monte_carlo_enabled=False).measurand("Y")
    assert m0.effective_dof == near(0.0101 ** 2 / (0.0001 ** 2 / 4), rel=1e-12)
    # r = 0.01: u_c² = 0.0001 + 0.01 + 2·0.01·0.001 = 0.01012; A's weight
    # w_A = 0.01·(0.01 + 0.01·0.1) = 0.00011 (derived in lpu.py): ν = 0.01012²/(0.00011²/4)
    b = evaluate(spec_of(TWO.replace("R]", "0.01]")))
    m = b.measurand("Y")
    assert m.effective_dof == near(0.01012 ** 2 / (0.00011 ** 2 / 4), rel=1e-12)
    assert m.effective_dof > 3e4                       # not 4 (the old group rule)
    assert m.expanded_uncertainty == near(stats.norm.ppf(0.975) * math.sqrt(0.01012),
                                                   rel=1e-4)
    # the tool's Monte Carlo (A drawn from t_4, JCGM 101 §6.4.9) validates it (JCGM 101 §8)
    assert b.mc("Y").validated
    # the rule is named in the record's notes, for the auditor
    assert any(n.startswith("ν_eff with correlated inputs of finite ν (A)") for n in b.run["notes"])


def test_reduces_to_g2b_without_correlation():
    # JCGM 100 eq. (G.2b) on random contributions: the general rule with r = I is G.2b exactly
    rng = np.random.default_rng(5)
    cu = rng.normal(size=6)
    dof = np.array([3.0, math.inf, 10.0, 7.5, math.inf, 1.0])
    var = float(cu @ cu)
    g2b = var ** 2 / sum(c ** 4 / v for c, v in zip(cu, dof) if math.isfinite(v))
    got = effective_dof(cu, cu, dof, var, estimation_groups([str(i) for i in range(6)], ()))
    assert got == near(g2b, rel=1e-12)


def test_simultaneous_observations_give_n_minus_1():
    # GUM H.2 (JCGM 100 Annex H.2): V, I and phi from one sample of n = 5 sets. c^T S c of one
    # sample's covariance is a scaled χ²_{n−1}, so every output has ν_eff = n − 1 = 4 exactly.
    b = evaluate(load_spec(spec_path("gum_h2")))
    for name in ("R", "X", "Z"):
        assert b.measurand(name).effective_dof == near(4.0, rel=1e-12)
    assert ["V", "I", "phi"] in b.run["dof_groups"]


def test_one_sample_coverage_with_known_truth():
    # Synthetic truth: two correlated quantities observed simultaneously (n = 4 sets, r = −0.6,
    # invented); Y = V − 2·I. Over 2000 repeated experiments, y ± U must cover the true Y in
    # about 95 % of them (binomial standard error 0.49 %; the band ±1.5 % is 3 standard
    # errors; a rule giving ν = ∞ here, k = 1.96 instead of t_0.975(3) = 3.18, would cover
    # only about 85 %). This is the case the estimation group gets exactly right.
    rng = np.random.default_rng(20261202)
    cov = np.array([[1.0, -0.6 * 0.5], [-0.6 * 0.5, 0.25]])
    truth = np.array([5.0, 2.0])
    template = """
        [model]
        Y = "V - 2 * I"
        [monte_carlo]
        enabled = false
        [inputs.V]
        observations = {v}
        [inputs.I]
        observations = {i}
        [correlations]
        from_observations = [["V", "I"]]
    """
    hits, n_rep = 0, 2000
    for _ in range(n_rep):
        x = rng.multivariate_normal(truth, cov, size=4)
        m = evaluate(spec_of(template.format(v=x[:, 0].tolist(), i=x[:, 1].tolist())),
                     monte_carlo_enabled=False).measurand("Y")
        hits += abs(m.value - (truth[0] - 2 * truth[1])) <= m.expanded_uncertainty
    assert hits / n_rep == near(0.95, abs=0.015)
