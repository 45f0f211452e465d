"""Trend and control rules of the logbook.

Sources: the weighted mean, its u and χ² of independent results (DOMAIN notes; Cox, Metrologia
39, 589, 2002 — the textbook formulas, common practice); generalised least squares for
correlated results, x̄ = 1ᵀV⁻¹x / 1ᵀV⁻¹1, u² = 1/1ᵀV⁻¹1, χ² = rᵀV⁻¹r (Aitken 1935; common
practice), computed here directly with numpy.linalg on the dense matrix — an independent route
from the library's low-rank sums; E_n with k = 2 (ISO 13528, ISO/IEC 17043); the χ² survival
function from scipy.stats.
"""

from __future__ import annotations

import json
import math
from dataclasses import replace

import numpy as np
import pytest
from logbook_helpers import SEASON, season_records
from numeric import near
from scipy import stats

from budget.errors import DataError
from budget.logbook import Logbook, add_files, compute_trend
from budget.logbook.gls import Sums, cov_of_means, mean_stats
from budget.logbook.store import Series, SeriesRow


def _dense(x, d, b):
    v = np.diag(d) + b @ b.T
    vi = np.linalg.inv(v)
    one = np.ones(len(x))
    w = one @ vi @ one
    m = one @ vi @ x / w
    r = x - m
    return m, 1 / math.sqrt(w), float(r @ vi @ r), v, vi @ one / w


def _sums(x, d, b) -> Sums:
    s = Sums(b.shape[1])
    for xi, di, bi in zip(x, d, b):
        s.add(xi, di, bi)
    return s


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_gls_matches_dense_matrix(seed):
    rng = np.random.default_rng(seed)
    n, k = 9, 3
    x = rng.normal(0, 1, n)
    d = rng.uniform(0.05, 0.5, n)
    b = rng.normal(0, 0.2, (n, k)) * (rng.uniform(size=(n, k)) < 0.6)
    m, u, chi2, v, a = _dense(x, d, b)
    g = mean_stats(_sums(x, d, b))
    assert g.value == near(m, rel=1e-10)
    assert g.standard_uncertainty == near(u, rel=1e-10)
    assert g.chi2 == near(chi2, rel=1e-8)
    assert g.p_value == near(stats.chi2.sf(chi2, n - 1), rel=1e-8)
    # covariance of a run outside the set with the mean: Σ_j a_j V_ij over the shared part
    bj = rng.normal(0, 0.2, k)
    assert g.cov_with_run(bj) == near(float(bj @ b.T @ a), rel=1e-10)
    # two disjoint means: aᵀ V_ST a' with V_ST = B_S B_Tᵀ
    g1, g2 = mean_stats(_sums(x[:4], d[:4], b[:4])), mean_stats(_sums(x[4:], d[4:], b[4:]))
    a1, a2 = _dense(x[:4], d[:4], b[:4])[4], _dense(x[4:], d[4:], b[4:])[4]
    assert cov_of_means(g1, g2) == near(float(a1 @ b[:4] @ b[4:].T @ a2), rel=1e-10)


def test_independent_runs_give_the_textbook_weighted_mean():
    x = np.array([1.0, 1.4, 0.7, 1.1])
    u = np.array([0.2, 0.3, 0.25, 0.1])
    w = 1 / u ** 2
    g = mean_stats(_sums(x, u ** 2, np.zeros((4, 0))))
    xbar = float(np.sum(w * x) / np.sum(w))
    assert g.value == near(xbar, rel=1e-12)
    assert g.standard_uncertainty == near(float(np.sum(w) ** -0.5), rel=1e-12)
    chi2 = float(np.sum(w * (x - xbar) ** 2))
    assert g.chi2 == near(chi2, rel=1e-10)
    assert g.birge_ratio == near(math.sqrt(chi2 / 3), rel=1e-10)


def _series(points, calibrations=(), terms=()) -> Series:
    """points: (chain, date, value, u); ids 1..N in order."""
    rows = tuple(SeriesRow(i + 1, dt, dt, ch, f"run {i + 1}", "ppm", v, u, 2 * u, 2.0)
                 for i, (ch, dt, v, u) in enumerate(points))
    return Series("delta_I", rows, 0, tuple(terms), tuple(calibrations))


def _two_chains(shift: float):
    pts, cals = [], []
    for i in range(16):
        day = f"2027-{1 + i // 4:02d}-{1 + 7 * (i % 4):02d}"
        for ch in ("A", "B"):
            after = i >= 8
            v = shift if (ch == "A" and after) else 0.0
            pts.append((ch, f"{day}T{'10' if ch == 'A' else '14'}:00", v, 0.2))
            ident = ("cert-2" if after else "cert-1") if ch == "A" else "amp"
            cals.append((len(pts), "R" if ch == "A" else "A_TR", "typed in", "", ident, "", ""))
    return _series(pts, cals)


def test_step_test_flags_the_recalibration_and_names_it():
    t = compute_trend(_two_chains(-0.7))
    step = [s for s in t.steps if s.recalibration.chain == "A"][0]
    # 8 runs each side, u = 0.2 each: u(mean) = 0.2/√8, u(diff) = 0.2/2 = 0.1,
    # E_n = −0.7 / (2 · 0.1) = −3.5 (derivation)
    assert step.en == near(-3.5, rel=1e-9)
    assert step.other_en == near(0.0, abs=1e-9)
    flags = [f for f in t.flags if f.kind == "step"]
    assert len(flags) == 1 and flags[0].chain == "A"
    assert flags[0].calibrations[0]["identifier"] == "cert-2"
    assert flags[0].calibrations[0]["previous_identifier"] == "cert-1"
    assert "cert-2" in flags[0].message and "did not step" in flags[0].message


def test_no_step_no_flag():
    t = compute_trend(_two_chains(0.0))
    assert [s.en for s in t.steps] == [near(0.0, abs=1e-12)]
    assert t.flags == ()


def test_run_against_running_mean_of_other_chain():
    t = compute_trend(_two_chains(-0.7))
    first_after = [c for c in t.run_checks if c["chain"] == "A"][8]
    # against 8 runs of B (u = 0.2 each → u(mean)² = 0.005) and no shared terms:
    # E_n = −0.7 / (2·√(0.04 + 0.005)) (derivation)
    assert first_after["runs_in_mean"] == 8
    assert first_after["en"] == near(-0.7 / (2 * math.sqrt(0.045)), rel=1e-9)
    flagged = {f.runs[0] for f in t.flags if f.kind == "run-vs-other-chain"}
    a_after = {c["id"] for c in t.run_checks if c["chain"] == "A"}
    assert len(flagged & a_after) >= 8


def test_shared_term_is_left_out_of_the_step():
    # every A run shares one term of contribution 0.15 (u = 0.25 = √(0.2² + 0.15²)); it is
    # the same before and after, so the step's u must not contain it: E_n as without it
    pts, cals, terms = [], [], []
    for i in range(8):
        pts.append(("A", f"2027-01-{10 + i:02d}", 0.0 if i < 4 else 0.4, 0.25))
        cals.append((i + 1, "R", "typed in", "", "c1" if i < 4 else "c2", "", ""))
        terms.append((i + 1, 0.15, "shared-voltmeter"))
    t = compute_trend(_series(pts, cals, terms))
    # u(diff)² = 0.2²/4 · 2 = 0.02 → E_n = 0.4 / (2·√0.02) (derivation)
    assert t.steps[0].en == near(0.4 / (2 * math.sqrt(0.02)), rel=1e-9)


def test_weighted_mean_covers_synthetic_truth():
    # synthetic truth: 400 seasons of 10 runs with a shared term; x̄ ± 2u(x̄) should cover the
    # true value about 95.4 % of the time (normal errors; binomial 99.9 % band of n = 400)
    rng = np.random.default_rng(20261202)
    covered = 0
    for _ in range(400):
        shared = rng.normal(0, 0.1)
        x = 3.0 + shared + rng.normal(0, 0.2, 10)
        s = _sums(x, np.full(10, 0.04), np.full((10, 1), 0.1))
        g = mean_stats(s)
        covered += abs(g.value - 3.0) <= 2 * g.standard_uncertainty
    lo, hi = stats.binom.ppf([0.0005, 0.9995], 400, 0.9545)
    assert lo <= covered <= hi


@pytest.fixture(scope="module")
def season_trend(tmp_path_factory):
    folder = tmp_path_factory.mktemp("season")
    book = folder / "book.sqlite"
    add_files(book, season_records(folder / "records"))
    with Logbook.open(book) as lb:
        return compute_trend(lb.series("delta_I"))


def test_season_flags_the_invented_recalibration(season_trend):
    truth = json.loads((SEASON / "truth.json").read_text(encoding="utf-8"))
    steps = [f for f in season_trend.flags if f.kind == "step"]
    assert len(steps) == 1 and steps[0].chain == "resistor-voltmeter"
    named = steps[0].calibrations[0]["identifier"]
    assert named == truth["resistor_certificate_after"][1]
    # synthetic truth: the step's interval (k = 2) covers the invented −0.7 ppm
    s = [s for s in season_trend.steps if s.flagged][0]
    assert abs(s.difference - truth["expected_step_ppm"]) <= 2 * s.standard_uncertainty
    # the routine amplifier recalibration is tested and passes
    amp = [s for s in season_trend.steps if s.recalibration.chain == "amplifier-voltmeter"]
    assert len(amp) == 1 and abs(amp[0].en) <= 1
    assert amp[0].recalibration.calibrations[0]["kind"] == "file"


def test_season_has_enough_runs(season_trend):
    # the demand: >= 40 runs over a year through two chains
    assert len(season_trend.points) >= 40
    assert {p.chain for p in season_trend.points} == {"resistor-voltmeter",
                                                      "amplifier-voltmeter"}
    dates = sorted(p.date_start for p in season_trend.points)
    assert dates[0][:7] == "2026-06" and dates[-1][:7] == "2027-05"


def test_trend_converts_records_in_other_units_of_one_dimension():
    # the same deviations, half of the records stated in 10⁻⁹ (×1000 the number in ppm; SI
    # Brochure 9th ed. Table 7 prefixes): the trend is the same, in the newest record's unit
    pts = [("A", f"2027-01-{d:02d}", 0.1 * (d % 3), 0.2) for d in range(1, 9)]
    base = _series(pts)
    mixed = Series(base.measurand, tuple(
        replace(r, unit="10⁻⁹", value=r.value * 1e3, standard_uncertainty=r.standard_uncertainty
                * 1e3, expanded_uncertainty=r.expanded_uncertainty * 1e3) if r.id % 2 else r
        for r in base.rows), 0, (), ())
    a, b = compute_trend(base), compute_trend(mixed)
    assert b.unit == "ppm" and any("converted to ppm" in n for n in b.notes)
    assert b.chains[0].mean.value == near(a.chains[0].mean.value, rel=1e-12)
    assert b.chains[0].mean.standard_uncertainty == near(
        a.chains[0].mean.standard_uncertainty, rel=1e-12)
    volt = Series(base.measurand, tuple(replace(r, unit="V") if r.id == 1 else r
                                        for r in base.rows), 0, (), ())
    with pytest.raises(DataError, match="different dimensions"):
        compute_trend(volt)


# --------------------------------------------------------------- recalibrations per input
def _rows(points):
    """points: (id, chain, date, value, u), in the order the book reads them (date, id)."""
    return tuple(SeriesRow(i, dt, dt, ch, f"run {i}", "ppm", v, u, 2 * u, 2.0)
                 for i, ch, dt, v, u in points)


def _close_recalibrations(shift: float = -0.7):
    """Chain A: R recalibrated (cert-1 → cert-2, value shifted by ``shift``) after run 8, the
    voltmeter g (shared with chain B: same source text) recalibrated one run later; chain B
    steady. 16 runs of A, 16 of B, u = 0.2 each, no shared terms (invented)."""
    pts, cals, rid = [], [], 0
    for i in range(16):
        day = f"2027-{1 + i // 4:02d}-{1 + 7 * (i % 4):02d}"
        for ch in ("A", "B"):
            rid += 1
            v = shift if (ch == "A" and i >= 8) else 0.0
            pts.append((rid, ch, f"{day}T{'10' if ch == 'A' else '14'}:00", v, 0.2))
            if ch == "A":
                cals.append((rid, "R", "typed in", "", "cert-2" if i >= 8 else "cert-1", "", ""))
            else:
                cals.append((rid, "A_TR", "typed in", "", "amp", "", ""))
            cals.append((rid, "g", "typed in", "", "dvm-2" if i >= 9 else "dvm-1", "", ""))
    return Series("dev_ppm", _rows(pts), 0, (), tuple(cals))


def test_step_window_is_not_cut_by_another_inputs_recalibration():
    t = compute_trend(_close_recalibrations())
    r_step = [s for s in t.steps if s.recalibration.chain == "A"
              and s.recalibration.calibrations[0]["input"] == "R"][0]
    # windows bounded by R's own recalibrations only: 8 runs with cert-1, 8 with cert-2;
    # u(diff) = 0.2·√(1/8 + 1/8) = 0.1, E_n = −0.7 / (2·0.1) = −3.5 (derivation)
    assert (r_step.before.n, r_step.after.n) == (8, 8)
    assert r_step.en == near(-3.5, rel=1e-9)
    flags = [f for f in t.flags if f.kind == "step"]
    assert [f.calibrations[0]["identifier"] for f in flags] == ["cert-2"]
    # the voltmeter's test in A is cut at the flagged R step: 1 run before (run 9 with dvm-1
    # and cert-2), 7 after → not tested, and says why
    g_a = [s for s in t.steps if s.recalibration.chain == "A"
           and s.recalibration.calibrations[0]["input"] == "g"][0]
    assert g_a.en is None and "cut at the flagged recalibration" in g_a.note
    # chain B's own test at the same voltmeter recalibration: 9 / 7 runs, no step
    g_b = [s for s in t.steps if s.recalibration.chain == "B"][0]
    assert (g_b.before.n, g_b.after.n) == (9, 7) and g_b.en == near(0.0, abs=1e-12)


def test_renamed_input_is_the_same_slot():
    # the same season, but from the recalibration on the resistor is called R_new
    base = _close_recalibrations()
    cals = tuple((rid, "R_new" if (inp == "R" and ident == "cert-2") else inp, kind, m,
                  ident, p, cd) for rid, inp, kind, m, ident, p, cd in base.calibrations)
    t = compute_trend(replace(base, calibrations=cals))
    flags = [f for f in t.flags if f.kind == "step"]
    assert len(flags) == 1 and flags[0].chain == "A"
    c = flags[0].calibrations[0]
    assert (c["input"], c["previous_input"], c["identifier"], c["previous_identifier"]) == \
        ("R_new", "R", "cert-2", "cert-1")
    assert flags[0].value == near(-3.5, rel=1e-9)          # as above (derivation)
    assert any("R_new" in n and "taken as one input" in n for n in t.notes)


def test_same_day_runs_in_reverse_id_order_make_one_recalibration():
    # A: 4 runs with cert-1, then on 2027-03-01 the last cert-1 run (id 6) and the first
    # cert-2 run (id 5, added first) on the same date, then 3 more cert-2 runs (invented)
    pts = [(1, "A", "2027-01-01", 0.0, 0.2), (2, "A", "2027-01-15", 0.0, 0.2),
           (3, "A", "2027-02-01", 0.0, 0.2), (4, "A", "2027-02-15", 0.0, 0.2),
           (5, "A", "2027-03-01", -0.7, 0.2), (6, "A", "2027-03-01", 0.0, 0.2),
           (7, "A", "2027-03-15", -0.7, 0.2), (8, "A", "2027-04-01", -0.7, 0.2),
           (9, "A", "2027-04-15", -0.7, 0.2)]
    cals = [(i, "R", "typed in", "", "cert-2" if v else "cert-1", "", "")
            for i, _c, _d, v, _u in pts]
    t = compute_trend(Series("dev_ppm", _rows(pts), 0, (), tuple(cals)))
    assert len(t.steps) == 1
    s = t.steps[0]
    # 5 runs with cert-1 (ids 1-4 and 6), 4 with cert-2: u(diff) = 0.2·√(1/5 + 1/4),
    # E_n = −0.7 / (2·u(diff)) (derivation)
    assert (s.before.n, s.after.n) == (5, 4)
    assert s.en == near(-0.7 / (2 * 0.2 * math.sqrt(1 / 5 + 1 / 4)), rel=1e-9)
    assert (s.recalibration.after_id, s.recalibration.before_id) == (6, 5)


# --------------------------------------------------------------- which chains are compared
def test_record_without_chain_is_not_the_other_chain():
    # one early record that names no chain (its own group, invented) before the two chains
    base = _two_chains(-0.7)
    early = SeriesRow(99, "2026-12-20", "2026-12-20", "", "free-form", "ppm", 0.05, 0.25,
                      0.5, 2.0)
    t = compute_trend(replace(base, rows=(early, *base.rows)))
    assert any("name no chain" in n for n in t.notes)
    step = [s for s in t.steps if s.recalibration.chain == "A"][0]
    assert step.other_chain == "B" and [o["chain"] for o in step.others] == ["B"]
    assert step.other_en == near(0.0, abs=1e-9)
    assert all(s.recalibration.chain != "(no chain)" for s in t.steps)
    a = [c for c in t.run_checks if c["chain"] == "A"]
    assert {c["against"] for c in a} == {"B"}
    # as without the early record: E_n = −0.7 / (2·√(0.04 + 0.005)) (derivation above)
    assert a[8]["en"] == near(-0.7 / (2 * math.sqrt(0.045)), rel=1e-9)
    nochain = [c for c in t.run_checks if c["id"] == 99][0]
    assert nochain["en"] is None and nochain["against"] == ""


def test_each_chain_is_compared_with_all_the_others():
    base = _two_chains(-0.7)
    n = len(base.rows)
    third = tuple(SeriesRow(n + 1 + i, f"{r.date_start[:10]}T16:00", f"{r.date_start[:10]}T16:00",
                            "C", f"C {i}", "ppm", 0.0, 0.2, 0.4, 2.0)
                  for i, r in enumerate(r for r in base.rows if r.chain == "A"))
    rows = tuple(sorted(base.rows + third, key=lambda r: (r.date_start, r.id)))
    t = compute_trend(replace(base, rows=rows))
    step = [s for s in t.steps if s.recalibration.chain == "A"][0]
    assert [o["chain"] for o in step.others] == ["B", "C"]
    assert all(o["en"] == near(0.0, abs=1e-9) for o in step.others)
    flag = [f for f in t.flags if f.kind == "step"][0]
    assert "B did not step" in flag.message and "C did not step" in flag.message
    a = [c for c in t.run_checks if c["chain"] == "A"][8]
    # against the pooled running mean of B and C: 8 runs of each ended before A's 9th run
    # began, u = 0.2 each, independent: u²(mean) = 0.04/16; E_n = −0.7 / (2·√(0.04 + 0.0025))
    assert a["against_chains"] == ["B", "C"] and a["runs_in_mean"] == 16
    assert a["en"] == near(-0.7 / (2 * math.sqrt(0.0425)), rel=1e-9)
    b = [c for c in t.run_checks if c["chain"] == "B"]
    assert {c["against"] for c in b} == {"A + C"}


@pytest.mark.parametrize("vectorised", [False, True])
def test_chi2_is_invariant_under_exact_offset_and_scale(vectorised):
    # the same runs as a relative deviation (µA/A) and as the current I = I0·(1 + dev·1e-6)
    # with I0 = 1.52e-10 A (950 MHz · e, rounded): |I|/u(I) ≈ 5e6. χ², u and p must be the
    # same (GLS is affine-equivariant: Aitken; common practice) — to 1e-9 relative
    rng = np.random.default_rng(16)
    n = 24
    dev = rng.normal(0.05, 0.25, n)
    d = np.full(n, 0.2 ** 2)
    b = np.column_stack([np.full(n, 0.05), np.where(np.arange(n) < 12, 0.08, 0.0)])
    i0, scale = 1.52e-10, 1.52e-10 * 1e-6
    cur = i0 * (1 + dev * 1e-6)

    def stats_of(x, dd, bb):
        return mean_stats(Sums.of(x, dd, bb) if vectorised else _sums(x, dd, bb))

    a, c = stats_of(dev, d, b), stats_of(cur, d * scale ** 2, b * scale)
    assert c.chi2 == near(a.chi2, rel=1e-9)
    assert c.p_value == near(a.p_value, rel=1e-8)
    assert c.standard_uncertainty / scale == near(a.standard_uncertainty, rel=1e-9)
    assert (c.value - i0) / scale == near(a.value, rel=1e-6)
    # the running means (prefix sums) too: the last one is the mean of all runs
    from budget.logbook.gls import running_means
    m, _w, _g = running_means(cur, d * scale ** 2, b * scale, np.array([n]))
    assert (m[0] - i0) / scale == near(a.value, rel=1e-6)


def test_typed_in_certificate_repeated_without_shared_as_is_one_shared_term():
    # 8 runs, each u² = 0.1² (own noise) + 0.1² (a typed-in certificate, the same source text,
    # no shared_as; invented). The certificate's error is the same in every run, so
    # u²(mean) = 0.1²/8 + 0.1² = 0.01125 (GUM F.1.2.3 reasoning; derivation), not 0.02/8
    u = math.sqrt(0.02)
    pts = [("A", f"2027-01-{d:02d}", 0.0, u) for d in range(1, 9)]
    cals = [(i + 1, "R", "typed in", "", "CCC certificate KB-R-1", "", "") for i in range(8)]
    unkeyed = tuple((i + 1, 0.1, "R") for i in range(8))
    t = compute_trend(replace(_series(pts, cals), unkeyed=unkeyed))
    assert t.chains[0].mean.standard_uncertainty == near(math.sqrt(0.01125), rel=1e-9)
    assert any("without shared_as" in n and "KB-R-1" in n for n in t.notes)
    # identified only by its numbers (no source text): independent, as in compare
    bare = [(i + 1, "R", "typed in", "", "typed in: 1.0 ± 0.1 ppm", "", "") for i in range(8)]
    t2 = compute_trend(replace(_series(pts, bare), unkeyed=unkeyed))
    assert t2.chains[0].mean.standard_uncertainty == near(math.sqrt(0.02 / 8), rel=1e-9)


def test_run_with_k_far_from_2_gets_en_on_its_stated_u():
    # run 17 (A's first after the step) states U with k = 3.18 (t-distribution, ν = 3: GUM
    # Table G.2, 3.18): E_n on 2u as before, and on its stated U:
    # −0.7 / √(3.18²·0.04 + 2²·0.005) (no shared terms; derivation); a note lists the run
    base = _two_chains(-0.7)
    rows = tuple(replace(r, coverage_factor=3.18, expanded_uncertainty=3.18 * 0.2)
                 if r.id == 17 else r for r in base.rows)
    t = compute_trend(replace(base, rows=rows))
    c = [c for c in t.run_checks if c["id"] == 17][0]
    assert c["en"] == near(-0.7 / (2 * math.sqrt(0.045)), rel=1e-9)
    assert c["en_stated_U"] == near(-0.7 / math.sqrt(3.18 ** 2 * 0.04 + 4 * 0.005), rel=1e-9)
    assert any("#17: k = 3.18" in n for n in t.notes)
    assert t.to_dict()["en_basis"] == "2u"
    assert "en_stated_U" not in [c for c in t.run_checks if c["id"] == 19][0]


def test_untested_recalibration_is_in_the_flags():
    # R recalibrated with 3 runs before and 1 after (invented): too few to test
    pts = [("A", f"2027-01-{d:02d}", 0.0, 0.2) for d in (1, 8, 15, 22)]
    cals = [(i + 1, "R", "typed in", "", "cert-2" if i == 3 else "cert-1", "", "")
            for i in range(4)]
    t = compute_trend(_series(pts, cals))
    f = [f for f in t.flags if f.kind == "step not tested"]
    assert len(f) == 1 and f[0].value is None and f[0].calibrations[0]["identifier"] == "cert-2"
    assert (f[0].date_from, f[0].date_to) == ("2027-01-15", "2027-01-22")
    assert "3 run(s) before and 1 after" in f[0].message
    json.dumps(t.to_dict(), allow_nan=False)


def test_season_false_alarm_expectation():
    t = compute_trend(_two_chains(-0.7))
    fa = t.false_alarms
    # p = P(|z| > 2) for a normal variable = 0.0455003 (normal table; common practice)
    assert fa["p_per_test"] == near(0.0455003, rel=1e-5)
    m = sum(c["en"] is not None for c in t.run_checks)
    assert (fa["step_tests"]["tests"], fa["run_checks"]["tests"]) == (1, m)
    assert fa["run_checks"]["p_at_least_one"] == near(1 - (1 - 0.0455003) ** m, rel=1e-5)
    # four step tests (the season of the review): 1 − 0.9545⁴ ≈ 17 % (derivation)
    from budget.logbook.trend import false_alarms
    assert false_alarms(4, 0)["step_tests"]["p_at_least_one"] == near(0.1701, abs=2e-4)
    assert "P(at least one)" in fa["text"]


def test_note_on_records_under_another_output_name():
    from types import SimpleNamespace

    from budget.logbook.trend import elsewhere_note
    t = compute_trend(_two_chains(0.0))
    e = [SimpleNamespace(chain="A", measurands=({"name": "dev_1e8", "unit": "×10⁻⁸"},
                                                {"name": "I", "unit": "A"})),
         SimpleNamespace(chain="B", measurands=({"name": "I", "unit": "A"},)),
         SimpleNamespace(chain="Z", measurands=({"name": "dev_1e8", "unit": "×10⁻⁸"},))]
    note = elsewhere_note(t, e)
    assert note.startswith("1 record(s)") and "dev_1e8: 1" in note
    assert elsewhere_note(t, e[1:]) is None
