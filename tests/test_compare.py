"""Tests of ``budget compare`` (budget/compare.py, its PDF and its CLI command).

References
----------
* Weighted mean, internal uncertainty (Σw)^(−1/2), χ² = Σ w (x − x̄)², Birge ratio √(χ²/(N − 1))
  and external uncertainty R_B·u_int: the textbook definitions (Birge 1932; as quoted in
  Kacker, Kessel & Sommer, J. Res. NIST 115, 453, 2010) — common practice; the arithmetic is
  written out beside each check.
* p-value of χ² with 2 degrees of freedom: P(χ²_2 ≥ x) = exp(−x/2) (closed form of the χ²
  distribution with two degrees of freedom, any statistics handbook).
* E_n = (x_1 − x_2)/√(U_1² + U_2²) with k = 2 (ISO 13528, ISO/IEC 17043); against a mean that
  contains the run, u²(x_i − x̄) = u_i² − u²(x̄) (derived in budget/compare.py's docstring and
  again below).
* e·f at f = 1 GHz = 160.2176634 pA exactly (SI Brochure, 9th ed.; e exact since 2019).
"""

from __future__ import annotations

import hashlib
import json
import math
from pathlib import Path

import pytest
from numeric import near

from budget.cli import main
from budget.compare import ReferenceValue, compare_runs
from budget.engine import evaluate
from budget.errors import DataError, UsageError
from budget.record import record_from_dict
from budget.spec import parse_spec

E_CHARGE = 1.602176634e-19       # C, exact (SI 2019)

SPEC = """
[budget]
title = '{title}'
coverage_probability = 0.95

[report]
measurement_date = "{date}"

[model]
I = "n * e * f * (1 + x + {cr} * r)"
dev = "I / (n * e * f) - 1"

[units]
I = "A"
dev = "1"

[constants]
n = 1
f = 1.0e9

[monte_carlo]
enabled = false

[inputs.x]
description = "Type A mean of the on/off differences (invented)"
value = {x}
standard_uncertainty = {ux}
evaluation = "A"

[inputs.r]
description = "relative correction of the reference resistor"
value = 0.0
standard_uncertainty = {ur}
"""


def record(x, ux, ur=0.0, *, cr=1, title="run", date="2026-11-20", digest=None) -> dict:
    """A result record of the spec above; ``digest`` gives the resistor term a data file."""
    b = evaluate(parse_spec(SPEC.format(x=x, ux=ux, ur=ur, cr=cr, title=title, date=date)),
                 monte_carlo_enabled=False)
    d = json.loads(b.to_json())
    if digest is not None:
        for q in d["inputs"]:
            if q["name"] == "r":
                q["source"]["files"] = [{"path": "r1g_history.csv", "sha256": digest,
                                         "rows": "1-12"}]
                q["source"]["origin"] = "module:resistor"
    return d


def digest_of(text: str) -> str:
    return hashlib.sha256(text.encode()).hexdigest()


# --------------------------------------------------------------------------- three runs by hand
# x = 10, 12, 14 (×1e-8), u = 1, 1, 2 (×1e-8), nothing shared (r is a constant here)
S = 1e-8
RUNS = [(10 * S, 1 * S), (12 * S, 1 * S), (14 * S, 2 * S)]
# w = 1/u² = 1, 1, 1/4 (×1e16); Σw = 2.25
# x̄ = (10 + 12 + 14/4)/2.25 = 25.5/2.25 = 11.3333…
XBAR = 25.5 / 2.25 * S
# u_int = (Σw)^(−1/2) = 1/1.5 = 0.6667
U_INT = 1 / 1.5 * S
# χ² = (−4/3)² + (2/3)² + (8/3)²/4 = 16/9 + 4/9 + 16/9 = 4
CHI2 = 4.0
# R_B = √(4/2) = √2; u_ext = √2 · 0.6667 = 0.9428
RB = math.sqrt(2)
# p = exp(−4/2) = e^(−2) = 0.135335 (χ² with 2 degrees of freedom)
P = math.exp(-2)
# E_n against x̄: u²(x_i − x̄) = u_i² − u²(x̄) = u_i² − 4/9 (x̄ contains run i)
#   run 1: (−4/3)/(2·√(1 − 4/9)) = (−4/3)/(2√5/3) = −2/√5 = −0.8944
#   run 2: (2/3)/(2√5/3) = 1/√5 = 0.4472
#   run 3: (8/3)/(2·√(4 − 4/9)) = (8/3)/(2·√32/3) = 4/√32 = 0.7071
EN_MEAN = [-2 / math.sqrt(5), 1 / math.sqrt(5), 4 / math.sqrt(32)]
# pairwise: (x_i − x_j)/(2√(u_i² + u_j²)):
#   1–2: −2/(2√2) = −0.7071   1–3: −4/(2√5) = −0.8944   2–3: −2/(2√5) = −0.4472
EN_PAIRS = [-1 / math.sqrt(2), -2 / math.sqrt(5), -1 / math.sqrt(5)]


@pytest.fixture(scope="module")
def three():
    return [record_from_dict(record(x, u, title=f"run {i}")) for i, (x, u) in enumerate(RUNS)]


def test_weighted_mean_birge_chi2_by_hand(three):
    c = compare_runs(three, pairwise=True, en_basis="2u")
    assert c.measurand == "dev"                # the relative deviation is chosen by default
    m = c.mean
    assert m.value == near(XBAR, rel=1e-6)
    assert m.internal_uncertainty == near(U_INT, rel=1e-6)
    assert m.chi2 == near(CHI2, rel=1e-6)
    assert m.dof == 2
    assert m.birge_ratio == near(RB, rel=1e-6)
    assert m.external_uncertainty == near(RB * U_INT, rel=1e-6)
    assert m.p_value == near(P, rel=1e-6)
    assert m.uncertainty_with_shared == near(U_INT, rel=1e-6)   # nothing shared
    assert [e.en for e in c.en] == near(EN_MEAN, rel=1e-6)
    assert [e.b for e in c.en] == ["weighted mean"] * 3
    assert [e.en for e in c.pairwise] == near(EN_PAIRS, rel=1e-6)
    assert [e.passed for e in c.pairwise] == [True, True, True]
    assert c.shared == ()
    # p = 0.95 and ν = ∞ give k = 1.96: every record is rescaled to U = 2u, and the output says so
    assert all(r.rescaled for r in c.runs)
    assert [r.expanded_uncertainty for r in c.runs] == near([2 * u for _, u in RUNS])
    assert any("stated k differs from 2" in n for n in c.notes) and c.en_basis == "2u"
    # default: each record's stated U = k·u with k = z_0.975 = 1.959964 (JCGM 100 Table G.2,
    # ν = ∞ at 95 %; ISO 13528 §9.7, memory): every E_n is the k = 2 one times 2/1.959964
    s = compare_runs(three, pairwise=True)
    z = 1.959963984540054      # scipy.stats.norm.ppf(0.975)
    assert s.en_basis == "stated" and not any(r.rescaled for r in s.runs)
    assert [e.en for e in s.en] == near([v * 2 / z for v in EN_MEAN], rel=1e-6)
    assert [e.en for e in s.pairwise] == near([v * 2 / z for v in EN_PAIRS], rel=1e-6)
    assert any("stated U = k·u" in n and "§9.7" in n for n in s.notes)


def test_the_current_gives_the_same_normalised_errors(three):
    # I = e·f·(1 + x) with e·f = 160.2176634 pA (SI 2019): every value and u scales by e·f,
    # so x̄, u and E_n scale the same way and E_n is unchanged
    c = compare_runs(three, measurand="I", pairwise=True, en_basis="2u")
    ef = E_CHARGE * 1e9
    assert c.unit == "A"
    assert c.mean.value == near(ef * (1 + XBAR), rel=1e-12)
    assert c.mean.internal_uncertainty == near(ef * U_INT, rel=1e-6)
    assert c.mean.chi2 == near(CHI2, rel=1e-6)
    assert [e.en for e in c.en] == near(EN_MEAN, rel=1e-6)
    assert [e.en for e in c.pairwise] == near(EN_PAIRS, rel=1e-6)


def test_against_a_typed_reference(three):
    # reference 11 ± 1 (×1e-8, k = 2): u_ref = 0.5
    #   run 1: (10 − 11)/(2√(1 + 0.25)) = −1/√5 = −0.4472
    #   run 3: (14 − 11)/(2√(4 + 0.25)) = 3/√17 = 0.7276
    c = compare_runs(three, reference=ReferenceValue(11 * S, 1 * S), en_basis="2u")
    assert c.en[0].en == near(-1 / math.sqrt(5), rel=1e-6)
    assert c.en[2].en == near(3 / math.sqrt(17), rel=1e-6)
    assert c.reference_kind == "value"


# --------------------------------------------------------------------------- shared terms
def test_shared_resistor_digest_is_left_out_of_the_difference():
    h = digest_of("date,value\n2026-01-01,1000000000\n")
    # run 1: x = 1 ± 0.4, run 2: x = 2 ± 0.4, both with the resistor term r: u = 0.3, c = 1,
    # from the same history file (same digest); u_c = √(0.16 + 0.09) = 0.5 for both
    r1 = record_from_dict(record(1 * S, 0.4 * S, 0.3 * S, digest=h))
    r2 = record_from_dict(record(2 * S, 0.4 * S, 0.3 * S, digest=h))
    # run 3: x = 3 ± 0.4 and the same r numbers but from another resistor file: nothing shared
    r3 = record_from_dict(record(3 * S, 0.4 * S, 0.3 * S, digest=digest_of("other")))
    c = compare_runs([r1, r2, r3], pairwise=True, en_basis="2u")
    (shared,) = c.shared
    assert shared.name == "r" and shared.runs == ("run 1", "run 2")
    assert shared.basis == "file digest" and shared.digests == (h,)
    e12, e13, _ = c.pairwise
    # shared: u²(x1 − x2) = 0.5² + 0.5² − 2·(0.3·0.3) = 0.32 = 0.4² + 0.4² (r left out)
    #   E_n = −1/(2·√0.32) = −0.8839
    assert e12.shared == ("r",)
    assert e12.standard_uncertainty == near(math.sqrt(0.32) * S, rel=1e-6)
    assert e12.en == near(-1 / (2 * math.sqrt(0.32)), rel=1e-6)
    # not shared: u²(x1 − x3) = 0.25 + 0.25 = 0.5; E_n = −2/(2√0.5) = −1.414 (fails)
    assert e13.shared == ()
    assert e13.en == near(-2 / (2 * math.sqrt(0.5)), rel=1e-6)
    assert e13.passed is False

    # weighted mean of runs 1 and 2 with their covariance V = [[0.25, 0.09], [0.09, 0.25]]:
    # a = (½, ½); aᵀVa = (0.25 + 0.25 + 2·0.09)/4 = 0.17; (Va)_1 = 0.17
    # var(x1 − x̄) = 0.25 − 2·0.17 + 0.17 = 0.08 (= 0.32/4, since x1 − x̄ = (x1 − x2)/2)
    c2 = compare_runs([r1, r2], en_basis="2u")
    assert c2.mean.uncertainty_with_shared == near(math.sqrt(0.17) * S, rel=1e-6)
    # generalised least squares: u²(x̄) = 1/(1ᵀV⁻¹1) = aᵀVa = 0.17 for these symmetric weights
    assert c2.mean.internal_uncertainty == near(math.sqrt(0.17) * S, rel=1e-6)
    assert c2.en[0].standard_uncertainty == near(math.sqrt(0.08) * S, rel=1e-6)
    assert c2.en[0].en == near(-0.5 / (2 * math.sqrt(0.08)), rel=1e-6)


def test_shared_term_with_different_sensitivities_keeps_the_residual():
    h = digest_of("history")
    # run 1 has c_r = 2: contribution 0.6, u1² = 0.16 + 0.36 = 0.52; run 2 c_r = 1: u2² = 0.25
    # cov = 0.6·0.3 = 0.18; u²(d) = 0.52 + 0.25 − 0.36 = 0.41 = 0.16 + 0.16 + (0.6 − 0.3)²
    r1 = record_from_dict(record(1 * S, 0.4 * S, 0.3 * S, cr=2, digest=h))
    r2 = record_from_dict(record(2 * S, 0.4 * S, 0.3 * S, cr=1, digest=h))
    (e,) = compare_runs([r1, r2], pairwise=True).pairwise
    assert e.standard_uncertainty == near(math.sqrt(0.41) * S, rel=1e-6)
    assert any("contributes differently" in n for n in compare_runs([r1, r2]).notes)


def _declare(d: dict, name: str, label: str) -> dict:
    for q in d["inputs"]:
        if q["name"] == name:
            q["source"]["shared_as"] = label
    return d


def test_typed_in_terms_are_shared_only_when_declared():
    # issue 11 item 9: the same typed-in numbers are not the same error
    r1 = record_from_dict(record(1 * S, 0.4 * S, 0.3 * S))
    r2 = record_from_dict(record(2 * S, 0.4 * S, 0.3 * S))
    c = compare_runs([r1, r2])
    assert c.shared == ()
    basis = {t.name: t for t in c.terms}
    assert not basis["r"].shared and "without shared_as" in basis["r"].basis
    # declared with the same label: shared, whatever else differs (here the uncertainty)
    d1 = record_from_dict(_declare(record(1 * S, 0.4 * S, 0.3 * S), "r", "R1G-cert-2026-07"))
    d2 = record_from_dict(_declare(record(2 * S, 0.4 * S, 0.31 * S), "r", "R1G-cert-2026-07"))
    (s,) = compare_runs([d1, d2]).shared
    assert (s.name, s.basis, s.runs) == ("r", "declared", ("run 1", "run 2"))
    # another label: another cause, not shared
    d3 = record_from_dict(_declare(record(2 * S, 0.4 * S, 0.3 * S), "r", "R1G-cert-2025-01"))
    assert compare_runs([d1, d3]).shared == ()


def test_reference_record_shares_terms_too():
    h = digest_of("history")
    r1 = record_from_dict(record(1 * S, 0.4 * S, 0.3 * S, digest=h))
    ref = record_from_dict(record(2 * S, 0.4 * S, 0.3 * S, digest=h, title="amplifier chain"))
    c = compare_runs([r1], reference=ref, en_basis="2u")
    assert c.reference_kind == "record" and c.mean is None
    # as in the pair above: E_n = −1/(2·√0.32)
    assert c.en[0].en == near(-1 / (2 * math.sqrt(0.32)), rel=1e-6)
    assert c.shared[0].runs == ("run 1", "reference")


def test_identical_records_have_no_en():
    d = _declare(_declare(record(1 * S, 0.4 * S, 0.3 * S), "r", "cert"), "x", "same-run")
    r = record_from_dict(d)
    (e,) = compare_runs([r, r], pairwise=True).pairwise
    assert e.en is None and e.passed is None


def test_bad_comparisons(three):
    with pytest.raises(UsageError):
        compare_runs(three[:1])                          # one run and no reference
    with pytest.raises(UsageError, match="did you mean 'dev'"):
        compare_runs(three, measurand="dew")
    other = record_from_dict(json.loads(json.dumps(record(1 * S, S)).replace(
        '"dev"', '"delta"')))
    with pytest.raises(DataError, match="no measurand 'dev'"):
        compare_runs([three[0], other])
    with pytest.raises(UsageError):
        ReferenceValue(1.0, -1.0)


# --------------------------------------------------------------------------- HTML and PDF
def test_html_is_escaped_and_the_pdf_holds_the_result(tmp_path):
    from pypdf import PdfReader

    from budget.report.compare_render import compare_html, compare_pdf
    nasty = '<script>alert(1)</script> <img src="file:///etc/passwd">'
    runs = [record_from_dict(record(x, u, title=nasty)) for x, u in RUNS]
    c = compare_runs(runs, pairwise=True, en_basis="2u")
    html = compare_html(c, files=["a.json", "b.json", "c.json"])
    assert "<script>" not in html and '<img src="file:' not in html
    assert "&lt;script&gt;" in html
    pdf = compare_pdf(c, files=["a.json", "b.json", "c.json"])
    out = tmp_path / "c.pdf"
    out.write_bytes(pdf)
    text = " ".join(p.extract_text() for p in PdfReader(out).pages)
    assert "Comparison of runs" in text
    assert "-0.89" in text and "0.71" in text           # E_n of runs 1 and 3 (hand values)
    assert "root:" not in text                          # nothing from /etc/passwd


def test_the_pdf_fetcher_refuses_everything_but_data_uris():
    from budget.report.compare_render import _fetcher
    f = _fetcher()
    for url in ("file:///etc/passwd", "http://127.0.0.1/x.png", "https://example.org/a.css"):
        with pytest.raises(ValueError, match="only data: URIs"):
            f.fetch(url)
    # a data: URI is served (RFC 2397: base64 of "hi" is "aGk=")
    assert f.fetch("data:text/plain;base64,aGk=").read() == b"hi"


# --------------------------------------------------------------------------- CLI
def _write(tmp_path: Path, name: str, d: dict) -> str:
    p = tmp_path / name
    p.write_text(json.dumps(d), encoding="utf-8")
    return str(p)


def _one_error_line(capsys) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "Traceback" not in err[0]
    return err[0]


def test_cli_compare(tmp_path, capsys):
    h = digest_of("history")
    files = [_write(tmp_path, f"r{i}.json", record(x, u, 0.0, digest=h))
             for i, (x, u) in enumerate(RUNS)]
    shared = [_write(tmp_path, f"s{i}.json", record(x, 0.4 * S, 0.3 * S, digest=h))
              for i, x in enumerate((1 * S, 2 * S))]
    out_json, out_pdf = tmp_path / "c.json", tmp_path / "c.pdf"
    assert main(["compare", *files, "--pairwise", "--en-basis", "2u", "--json",
                 str(out_json)]) == 0
    text = capsys.readouterr().out
    assert "Birge ratio R_B = 1.41" in text                   # √2
    assert "-0.89" in text and "0.45" in text and "0.71" in text
    assert max(len(ln) for ln in text.splitlines()) <= 100
    data = json.loads(out_json.read_text(encoding="utf-8"))
    assert data["weighted_mean"]["chi2"] == near(CHI2, rel=1e-6)
    assert main(["compare", *shared, "--pdf", str(out_pdf), "--reference", "1.5e-8", "1e-8"]) == 0
    text = capsys.readouterr().out
    assert "terms across runs" in text and "  r " in text and "shared: same data file" in text
    assert "typed in without shared_as: independent" in text       # x: no declared cause
    assert out_pdf.read_bytes().startswith(b"%PDF")
    # a reference record given first swallows the records after it in argparse: still works
    assert main(["compare", "--reference", shared[1], shared[0]]) == 0
    assert "reference" in capsys.readouterr().out


def test_cli_compare_bad_input(tmp_path, capsys):
    good = _write(tmp_path, "g.json", record(1 * S, S))
    bad = tmp_path / "bad.json"
    bad.write_text("{\n\n  not json", encoding="utf-8")
    assert main(["compare", good, str(bad)]) == 2
    assert "bad.json:3" in _one_error_line(capsys)
    assert main(["compare", good, str(tmp_path / "missing.json")]) == 2
    assert "not found" in _one_error_line(capsys)
    assert main(["compare", good]) == 2                        # one record, no reference
    _one_error_line(capsys)
    assert main(["compare", good, good, "--reference", "1.0"]) == 2
    assert "--reference" in _one_error_line(capsys)
    assert main(["compare", good, good, "--measurand", "nope"]) == 2
    assert "nope" in _one_error_line(capsys)
    out_pdf = tmp_path / "no" / "c.pdf"
    assert main(["compare", good, good, "--pdf", str(out_pdf)]) == 2
    _one_error_line(capsys)
    assert not out_pdf.exists()


def test_lookalike_typed_in_terms_get_a_note_but_stay_independent():
    # review finding: the same typed-in certificate in two specs without shared_as.  Kept
    # independent (issue 11 item 9) but said on screen: for two runs with u_x = 0.4, u_r = 0.3,
    # u(x̄)² = 0.4²/2 + 0.3²·(1 + r)/2 (equal weights, by hand) -> 0.354 with r = 0 but 0.412
    # with r = 1, so an undeclared common certificate understates u(x̄)
    r1 = record_from_dict(record(1 * S, 0.4 * S, 0.3 * S, title="run A"))
    r2 = record_from_dict(record(2 * S, 0.4 * S, 0.3 * S, title="run B"))
    c = compare_runs([r1, r2])
    assert c.shared == ()
    (note,) = [n for n in c.notes if "not declared shared" in n]
    assert note.startswith("r is typed in") and "run 1, run 2" in note
    # a different u: no note (not the same numbers)
    r3 = record_from_dict(record(2 * S, 0.4 * S, 0.31 * S))
    assert not [n for n in compare_runs([r1, r3]).notes if "not declared shared" in n]
    # declared: shared, no note
    d1 = record_from_dict(_declare(record(1 * S, 0.4 * S, 0.3 * S), "r", "cert"))
    d2 = record_from_dict(_declare(record(2 * S, 0.4 * S, 0.3 * S), "r", "cert"))
    assert not [n for n in compare_runs([d1, d2]).notes if "not declared shared" in n]


def test_figure_legend_names_the_u_drawn(three):
    # default en_basis "stated": the bars are each record's stated U (k = 1.96 here), not 2u
    stated = compare_runs(three).figure
    assert [s["label"] for s in stated["series"] if s["style"] == "points"] == [
        "runs ± U (each run's stated k)"]
    assert [r.expanded_uncertainty for r in compare_runs(three).runs] == near(
        [1.959963984540054 * u for _, u in RUNS], rel=1e-9)   # z_0.975, JCGM 100 Table G.2
    two = compare_runs(three, en_basis="2u").figure
    assert [s["label"] for s in two["series"] if s["style"] == "points"] == ["runs ± 2u"]


def test_comparison_pdf_has_header_and_approval(tmp_path):
    # issue 13 item 6: laboratory header, comparison identifier, date and an approval block
    from budget.report.compare_render import compare_html
    runs = [record_from_dict(record(x, u)) for x, u in RUNS]
    c = compare_runs(runs, en_basis="2u")
    html = compare_html(c, laboratory="Invented Lab <b>", identifier="CMP-TEST",
                        date="2026-12-03")
    assert "Invented Lab &lt;b&gt;" in html and "CMP-TEST" in html and "2026-12-03" in html
    assert "Approval" in html and "Approved by" in html
    assert "quality procedures" in html
    bare = compare_html(c)
    assert "Laboratory not stated" in bare


def test_compare_cli_pdf_names_laboratory_and_identifier(tmp_path, capsys):
    from pypdf import PdfReader

    from budget.cli import main
    files = []
    for i, (x, u) in enumerate(RUNS):
        d = record(x, u)
        d.setdefault("run", {})["report"] = {"laboratory": "Invented Lab (invented)"}
        p = tmp_path / f"r{i}.json"
        p.write_text(json.dumps(d), encoding="utf-8")
        files.append(str(p))
    assert main(["compare", *files, "--pdf", str(tmp_path / "c.pdf")]) == 0
    text = " ".join(pg.extract_text() for pg in PdfReader(tmp_path / "c.pdf").pages)
    assert "Invented Lab (invented)" in text and "CMP-" in text
