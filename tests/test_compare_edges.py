"""Edges of the comparison of runs (issue 18, mutation gaps): undefined E_n, u = 0, the names
of the shared terms, a correlation that cannot be carried, the reference's legend, and the
overflow limit of a typed-in reference.

Sources: E_n = (x_a − x_b)/U(x_a − x_b) (ISO 13528 §9.7; ISO/IEC 17043) is undefined when the
difference has no uncertainty; the variance of a combination of correlated results (JCGM 100
eq. 13); the largest double, 1.797…e308 (IEEE 754 binary64), whose square root is 1.34e154.
The runs come from tests/test_compare.py's spec. Rules without a published source are marked
*project convention*.
"""

from __future__ import annotations

import json

import pytest
from numeric import near
from test_compare import SPEC, S, _declare, digest_of, record

from budget import evaluate
from budget.compare import ReferenceValue, compare_runs
from budget.errors import DataError, UsageError
from budget.record import record_from_dict
from budget.spec import parse_spec


def test_identical_records_have_an_undefined_en_and_say_so():
    # the same record twice: every term shared, u(difference) = 0, E_n undefined (ISO 13528
    # divides by U); project convention: u and U of the difference are reported as 0 and a
    # note names the pair
    d = _declare(_declare(record(1 * S, 0.4 * S, 0.3 * S), "r", "cert"), "x", "same-run")
    r = record_from_dict(d)
    c = compare_runs([r, r], pairwise=True, labels=["a", "b"])
    (e,) = c.pairwise
    assert e.en is None and e.standard_uncertainty == 0.0 and e.expanded_uncertainty == 0.0
    assert sum("share every term" in n for n in c.notes) == 3, c.notes   # two vs x̄, a vs b


def test_no_undefined_note_when_every_en_exists():
    runs = [record_from_dict(record(x * S, 1 * S, title=f"run {x}")) for x in (10, 12, 14)]
    c = compare_runs(runs, pairwise=True)
    assert all(e.en is not None for e in c.en + c.pairwise)
    assert not any("share every term" in n for n in c.notes), c.notes


def test_a_run_with_zero_uncertainty_is_refused():
    # project convention: a result with u = 0 can be neither weighted (1/u²) nor compared
    good = record_from_dict(record(1 * S, 1 * S))
    zero = record_from_dict(record(2 * S, 0.0))
    with pytest.raises(DataError) as info:
        compare_runs([good, zero], files=["a.json", "b.json"])
    assert info.value.field == "standard_uncertainty" and info.value.file == "b.json"


def test_en_against_the_mean_names_the_shared_terms():
    # both runs carry the same resistor history (same digest): the term r is shared, and the
    # E_n of each run against the weighted mean names it
    h = digest_of("the same resistor history")
    r1 = record_from_dict(record(1 * S, 0.45 * S, 0.60 * S, digest=h))
    r2 = record_from_dict(record(2 * S, 0.80 * S, 0.60 * S, digest=h))
    c = compare_runs([r1, r2])
    assert [e.shared for e in c.en] == [("r",), ("r",)]
    u1 = record_from_dict(record(1 * S, 0.45 * S, 0.60 * S))
    u2 = record_from_dict(record(2 * S, 0.80 * S, 0.60 * S))       # no file: not shared
    assert [e.shared for e in compare_runs([u1, u2]).en] == [(), ()]


def test_correlation_with_a_non_shared_input_is_named_as_not_carried():
    # project convention: r(x, r) inside run a links a shared term (r) and one that is not (x);
    # the between-run covariance carries only the shared terms (JCGM 100 eq. 13 over the
    # shared r alone) and a note says which correlation was left out
    h = digest_of("the same resistor history")
    spec = SPEC + "\n[correlations]\npairs = [[\"x\", \"r\", 0.5]]\n"
    b = evaluate(parse_spec(spec.format(x=1 * S, ux=0.45 * S, ur=0.60 * S, cr=1, title="run",
                                        date="2026-11-20")), monte_carlo_enabled=False)
    d = json.loads(b.to_json())
    for q in d["inputs"]:
        if q["name"] == "r":
            q["source"]["files"] = [{"path": "r1g_history.csv", "sha256": h, "rows": "1-12"}]
            q["source"]["origin"] = "module:resistor"
    r1 = record_from_dict(d)
    r2 = record_from_dict(record(2 * S, 0.80 * S, 0.60 * S, digest=h))
    notes = compare_runs([r1, r2], labels=["a", "b"]).notes
    assert any("not carried" in n and "r(x, r) for a and b" in n for n in notes), notes
    plain = compare_runs([record_from_dict(record(1 * S, 0.45 * S, 0.60 * S, digest=h)), r2])
    assert not any("not carried" in n for n in plain.notes)


def test_reference_record_legend_names_the_u_drawn():
    # project convention (figure legend): the reference band is its U with the k used
    runs = [record_from_dict(record(x * S, 1 * S, title=f"run {x}")) for x in (10, 12)]
    ref = record_from_dict(record(11 * S, 1 * S, title="reference"))
    for basis, words in (("stated", "its stated k"), ("2u", "k = 2")):
        fig = compare_runs(runs, reference=ref, en_basis=basis).figure
        band = [s["label"] for s in fig["series"] if s["style"] == "band"]
        assert band == [f"reference ± U ({words})"], band


def test_typed_reference_near_the_float_limit():
    # E_n squares u = U/2: U = 2.6e154 gives u² = 1.69e308 < 1.797e308 (accepted); U = 2.8e154
    # gives 1.96e308, beyond the largest double (refused, IEEE 754 binary64)
    ReferenceValue(0.0, 2.6e154)
    with pytest.raises(UsageError):
        ReferenceValue(0.0, 2.8e154)


def test_typed_reference_entry_and_its_band():
    # ISO 13528 §9.7: a typed-in reference is VALUE ± U with k = 2, so u = U/2 and nothing is
    # rescaled; project convention (figure data): the band spans the runs drawn at x = 1 … n,
    # from 0.5 to n + 0.5, at VALUE ± U
    runs = [record_from_dict(record(x * S, 1 * S, title=f"run {x}")) for x in (10, 12)]
    c = compare_runs(runs, reference=ReferenceValue(11 * S, 1 * S), en_basis="2u")
    ref = c.reference
    assert c.reference_kind == "value" and ref.rescaled is False
    assert (ref.value, ref.standard_uncertainty, ref.stated_coverage_factor) == (
        11 * S, 0.5 * S, 2.0)
    (band,) = [s for s in c.figure["series"] if s["style"] == "band"]
    assert band["x"] == [0.5, 2.5]
    # 11·S ∓ 1·S in float: to one rounding of the 1e-8-scale values (abs = 1e-22)
    assert band["y_low"] == near([10 * S] * 2, rel=0, abs=1e-22)
    assert band["y_high"] == near([12 * S] * 2, rel=0, abs=1e-22)
    (line,) = [s for s in c.figure["series"] if s["style"] == "line"]   # the centre line
    assert line["x"] == [0.5, 2.5] and line["y"] == [11 * S, 11 * S]
    points = [s for s in c.figure["series"] if s["style"] == "points"][0]
    assert points["x"] == [1.0, 2.0]


def test_en_of_exactly_one_passes():
    # ISO 13528 §9.7 (memory): |E_n| ≤ 1 is satisfactory, the boundary included. E_n = 10/10:
    # difference 10, U = √(6² + 8²) = 10 exactly in binary
    from budget.compare import NormalisedError
    at_one = NormalisedError("a", "b", 10.0, 5.0, 10.0, 10.0 / 10.0, ())
    assert at_one.en == 1.0 and at_one.passed is True
    assert NormalisedError("a", "b", 10.5, 5.0, 10.0, 1.05, ()).passed is False
    assert NormalisedError("a", "b", 0.0, 0.0, 0.0, None, ()).passed is None


def _k2_record(x, ux):
    # the spec of tests/test_compare.py with k fixed at 2 ([budget] coverage_factor, README)
    text = SPEC.replace("[budget]\n", "[budget]\ncoverage_factor = 2\n", 1)
    b = evaluate(parse_spec(text.format(x=x, ux=ux, ur=0.0, cr=1, title="k2",
                                        date="2026-11-20")), monte_carlo_enabled=False)
    return record_from_dict(json.loads(b.to_json()))


def test_a_run_stated_with_k_2_is_not_rescaled():
    # en_basis = "2u" draws every run at 2·u (ISO 13528 §9.7 E_n with k = 2); a run whose
    # stated k is 2 is then not "rescaled" (project convention, compare.RunEntry), one stated
    # with k = t_p(ν) = 1.96 (the spec of test_compare.py, ν = ∞) is
    runs = [_k2_record(10 * S, 3 * S), _k2_record(20 * S, 3 * S)]
    c = compare_runs(runs, en_basis="2u")
    assert [(e.stated_coverage_factor, e.rescaled) for e in c.runs] == [(2.0, False)] * 2
    plain = [record_from_dict(record(x * S, 1 * S)) for x in (10, 11)]
    assert all(e.rescaled for e in compare_runs(plain, en_basis="2u").runs)


def test_weighted_mean_band_is_two_u_either_side():
    # project convention (figure data): without a reference the band is x̄ ± 2·u(x̄). Runs
    # 10·S and 11·S with u = S each: x̄ = 10.5·S, u(x̄) = S/√2 (1/u² weights, by hand; χ² = ½,
    # Birge ratio below 1: no inflation), half-width √2·S
    runs = [record_from_dict(record(x * S, 1 * S, title=f"run {x}")) for x in (10, 11)]
    c = compare_runs(runs, en_basis="2u")
    (band,) = [s for s in c.figure["series"] if s["style"] == "band"]
    # the model I/(n·e·f) − 1 rounds the runs' values by ~1e-16 absolute (float 1 + x), some
    # 1e-9 of x = 1e-7: rel = 1e-6 leaves room and still tells 2·u from u/2 or u
    half = (band["y_high"][0] - band["y_low"][0]) / 2
    centre = (band["y_high"][0] + band["y_low"][0]) / 2
    assert half == near(2 ** 0.5 * S, rel=1e-6)
    assert centre == near(10.5 * S, rel=1e-6)


def test_labels_may_not_take_the_reference_label():
    # compare_runs: one unique label per run, none equal to the reference's (project
    # convention: the figure and the E_n table name them apart); without a reference the
    # word is free
    runs = [record_from_dict(record(x * S, 1 * S)) for x in (10, 11)]
    with pytest.raises(UsageError, match="unique label"):
        compare_runs(runs, labels=["reference", "b"], reference=ReferenceValue(11 * S, 1 * S))
    assert compare_runs(runs, labels=["reference", "b"]).runs[0].label == "reference"
