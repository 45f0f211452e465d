"""``budget compare`` with the full covariance of the runs (issue 11 items 8, 9 and 11).

References, named beside each check:
* Generalised χ² = rᵀV⁻¹r and the generalised least-squares mean a = V⁻¹1/(1ᵀV⁻¹1),
  u²(x̄) = 1/(1ᵀV⁻¹1) (Cox, Metrologia 39 (2002) 589 for the independent case, memory; the
  correlated form is the textbook GLS estimate, common practice). The numbers are derived by
  hand beside each check (eigen-decomposition of a 2 × 2 matrix).
* P(χ²_1 ≥ x) = erfc(√(x/2)) (closed form of the χ² distribution with one degree of freedom).
* E_n = (x_1 − x_2)/√(U_1² + U_2²) with the participants' stated U (ISO 13528 §9.7, memory).
* Covariance of two predictions of one straight line fitted by ordinary least squares with
  equal σ: cov(ŷ(t_a), ŷ(t_b)) = σ²·(1/n + (t_a − t̄)(t_b − t̄)/S_tt), so
  var(ŷ(t_a) − ŷ(t_b)) = σ²·(t_a − t_b)²/S_tt (JCGM 100 H.3 mathematics).
"""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from numeric import near

from budget.cli import main
from budget.compare import compare_runs
from budget.engine import evaluate
from budget.record import record_from_dict
from budget.spec import parse_spec

sys.path.insert(0, str(Path(__file__).parent))
from test_compare import S, digest_of, record  # noqa: E402  (the shared record builder)


def _declare(d: dict, name: str, label: str) -> dict:
    for q in d["inputs"]:
        if q["name"] == name:
            q["source"]["shared_as"] = label
    return d


# ---- item 8: χ², p, Birge ratio with the shared-term covariance ------------------------------
def test_issue_case_chi2_p_birge_with_shared_term():
    # two runs: independent u = 0.3 and an identical shared term u = 0.954, values 0 and 1
    h = digest_of("one history")
    r1 = record_from_dict(record(0.0, 0.3 * S, 0.954 * S, digest=h))
    r2 = record_from_dict(record(1 * S, 0.3 * S, 0.954 * S, digest=h))
    c = compare_runs([r1, r2], pairwise=True, en_basis="2u")
    m = c.mean
    # V = [[0.09 + s, s], [s, 0.09 + s]], s = 0.954² = 0.910116. By symmetry a = (½, ½), x̄ = ½.
    # (rel = 1e-6: the record computes dev = I/(n·e·f) − 1 near 1e-8, which keeps ~8 digits)
    assert m.value / S == near(0.5, rel=1e-6)
    # r = (−½, ½) is the eigenvector of V with eigenvalue V11 − V12 = 0.09:
    # χ² = rᵀV⁻¹r = (¼ + ¼)/0.09 = 5.5556 (the independent-run formula gave 0.5/1.000116 = 0.50)
    assert m.chi2 == near(0.5 / 0.09, rel=1e-6)
    assert m.chi2 == near(5.56, abs=0.005)
    # p = P(χ²_1 ≥ 5.5556) = erfc(√(5.5556/2)) = 0.0184
    assert m.p_value == near(math.erfc(math.sqrt(m.chi2 / 2)), rel=1e-6)
    assert m.p_value == near(0.018, abs=0.0005)
    # R_B = √(χ²/1) = 2.357
    assert m.birge_ratio == near(math.sqrt(0.5 / 0.09), rel=1e-6)
    assert m.birge_ratio == near(2.36, abs=0.005)
    # u²(x̄) = 1/(1ᵀV⁻¹1): (1, 1) has eigenvalue V11 + V12 = 0.09 + 2s, so 1ᵀV⁻¹1 = 2/(0.09 + 2s)
    u_int = math.sqrt((0.09 + 2 * 0.910116) / 2)
    assert m.internal_uncertainty / S == near(u_int, rel=1e-6)
    assert m.external_uncertainty / S == near(u_int * math.sqrt(0.5 / 0.09), rel=1e-6)
    # E_n of the pair in the same output: 1/(2·√(2·0.09)) = 1.18 — now consistent with χ²
    (e,) = c.pairwise
    assert e.en == near(-1 / (2 * math.sqrt(0.18)), rel=1e-6)


def test_independent_runs_keep_the_textbook_weighted_mean():
    # nothing shared: V diagonal, GLS = 1/u² weights. x = 1, 3 with u = 1, 2:
    # w = 1, ¼; x̄ = (1 + ¾)/1.25 = 1.4; χ² = 0.4² + 1.6²/4 = 0.8 (Birge 1932, common practice)
    r1 = record_from_dict(record(1 * S, 1 * S))
    r2 = record_from_dict(record(3 * S, 2 * S))
    m = compare_runs([r1, r2]).mean
    assert m.value / S == near(1.4, rel=1e-6)
    assert m.chi2 == near(0.8, rel=1e-6)
    assert m.internal_uncertainty / S == near(1.25 ** -0.5, rel=1e-6)


# ---- item 9: typed-in content is not a declared common cause -----------------------------------
def test_identical_typed_in_reproducibility_term_is_not_shared():
    # x: Type A u = 0.1, rep: reproducibility u = 0.2 typed identically in both specs,
    # values differ by 0.5. Independent: E_n = 0.5/(2·√(2·(0.01 + 0.04))) = 0.5/(2·√0.1) = 0.79
    # (issue 11: "E_n = 0.79 not 1.77"); dropping rep as shared gave 0.5/(2·√0.02) = 1.77.
    r1 = record_from_dict(record(0.0, 0.1 * S, 0.2 * S))
    r2 = record_from_dict(record(0.5 * S, 0.1 * S, 0.2 * S))
    (e,) = compare_runs([r1, r2], pairwise=True, en_basis="2u").pairwise
    assert e.en == near(-0.5 / (2 * math.sqrt(0.1)), rel=1e-6)
    assert round(abs(e.en), 2) == 0.79 and e.shared == ()
    # declared as one cause (shared_as), it is left out: 1.77
    d1 = record_from_dict(_declare(record(0.0, 0.1 * S, 0.2 * S), "r", "lab-reproducibility"))
    d2 = record_from_dict(_declare(record(0.5 * S, 0.1 * S, 0.2 * S), "r",
                                   "lab-reproducibility"))
    (e2,) = compare_runs([d1, d2], pairwise=True, en_basis="2u").pairwise
    assert e2.en == near(-0.5 / (2 * math.sqrt(0.02)), rel=1e-6)
    assert round(abs(e2.en), 2) == 1.77 and e2.shared == ("r",)


def _history(folder: Path, n=9, u=100.0, step=60):
    rng = np.random.default_rng(7)
    start = pd.Timestamp("2024-01-15")
    lines = ["date,value,expanded_uncertainty,coverage_factor"]
    for i in range(n):
        d = (start + pd.Timedelta(days=step * i)).date().isoformat()
        lines.append(f"{d},{float(1e9 + 0.2 * step * i + rng.normal(0, u))!r},{2 * u!r},2.0")
    (folder / "hist.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    return np.array([step * i for i in range(n)], dtype=float), start


_RUN = """[budget]
title = "run at {at}"
coverage_factor = 2
[model]
Y = "R + x"
[monte_carlo]
enabled = false
[inputs.x]
value = {x}
standard_uncertainty = 30.0
evaluation = "A"
[inputs.R]
module = "resistor"
file = "hist.csv"
at = "{at}"
inflate = "never"
{extra}
"""


def _run(folder, at, x, extra=""):
    return evaluate(parse_spec(_RUN.format(at=at, x=x, extra=extra), file="spec.toml",
                               folder=folder))


@pytest.mark.parametrize("uc", [0.0, 60.0])
def test_resistor_prediction_at_two_dates_correlated_by_the_fit(tmp_path, uc):
    # one history, two runs 200 days apart. The drift rows are the same error only as far as
    # the fit says: var(ŷ(t_a) − ŷ(t_b)) = σ²·(t_a − t_b)²/S_tt (OLS, equal σ, JCGM 100 H.3),
    # σ² = u² − u_c² (the common part is in the span of the line and cancels from the
    # difference; its row R_common is shared with r = 1). x is independent (Type A).
    t, start = _history(tmp_path)
    extra = f"common_standard_uncertainty = {uc}" if uc else ""
    ta, tb = 520.0, 720.0
    a = _run(tmp_path, (start + pd.Timedelta(days=ta)).date().isoformat(), 0.0, extra)
    b = _run(tmp_path, (start + pd.Timedelta(days=tb)).date().isoformat(), 0.0, extra)
    c = compare_runs([a, b], pairwise=True, en_basis="2u")
    (e,) = c.pairwise
    sigma2 = 100.0 ** 2 - uc ** 2
    stt = float(np.sum((t - t.mean()) ** 2))
    expect = 2 * 30.0 ** 2 + sigma2 * (ta - tb) ** 2 / stt
    assert e.standard_uncertainty ** 2 == near(expect, rel=1e-6)
    # the correlation used for R_cal (or R): cov/√(var_a var_b) from the same formula
    cal = next(s for s in c.shared if s.name in ("R", "R_cal"))
    (la, lb, r), = cal.correlations
    va = sigma2 * (1 / t.size + (ta - t.mean()) ** 2 / stt)
    vb = sigma2 * (1 / t.size + (tb - t.mean()) ** 2 / stt)
    cov = sigma2 * (1 / t.size + (ta - t.mean()) * (tb - t.mean()) / stt)
    assert r == near(cov / math.sqrt(va * vb), rel=1e-6) and r < 1
    basis = {tb_.name: tb_.basis for tb_ in c.terms}
    assert "drift-fit covariance" in basis[cal.name] and "independent" in basis["x"]
    if uc:
        assert "R_common" in {s.name for s in c.shared}


# ---- item 11: E_n with the stated U -----------------------------------------------------------
def _with_k(d: dict, k: float) -> dict:
    for m in d["measurands"]:
        m["coverage_factor"] = k
        m["expanded_uncertainty"] = k * m["standard_uncertainty"]
    return d


def test_en_uses_each_records_stated_expanded_uncertainty():
    # U_1 = 2.5·0.4 = 1.0, U_2 = 2.0·0.3 = 0.6 (×1e-8); E_n = (1 − 2)/√(1.0² + 0.6²)
    # (ISO 13528 §9.7, memory); with 2u: (1 − 2)/(2·√(0.16 + 0.09)) = −1.0
    r1 = record_from_dict(_with_k(record(1 * S, 0.4 * S), 2.5))
    r2 = record_from_dict(_with_k(record(2 * S, 0.3 * S), 2.0))
    (e,) = compare_runs([r1, r2], pairwise=True).pairwise
    assert e.en == near(-1 / math.sqrt(1.0 + 0.36), rel=1e-6)
    (e2,) = compare_runs([r1, r2], pairwise=True, en_basis="2u").pairwise
    assert e2.en == near(-1.0, rel=1e-6)


def test_cli_says_which_basis(tmp_path, capsys):
    files = []
    for i, (x, k) in enumerate(((1 * S, 2.5), (2 * S, 2.0))):
        p = tmp_path / f"r{i}.json"
        p.write_text(json.dumps(_with_k(record(x, 0.4 * S), k)))
        files.append(str(p))
    assert main(["compare", *files, "--pairwise"]) == 0
    out = capsys.readouterr().out
    assert "stated U (its own k; ISO 13528 §9.7)" in out
    assert main(["compare", *files, "--pairwise", "--en-basis", "2u"]) == 0
    assert "U = 2u for every result" in capsys.readouterr().out
    assert main(["compare", *files, "--en-basis", "3u"]) == 2
