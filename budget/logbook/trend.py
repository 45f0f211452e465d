"""Trend and control: one measurand against measurement date, per chain, with the alarms.

Given a :class:`~budget.logbook.store.Series` (what the book holds of one measurand):

* **points** — each run's value with its expanded uncertainty U as stated, grouped by chain;
* **weighted mean per chain** — generalised least squares with the shared terms' covariance
  and the generalised χ², ν = N − 1, p and Birge ratio (:mod:`budget.logbook.gls`);
* **control rule** — each run against the *running* weighted mean of all the other chains
  pooled (every run of theirs measured before this one begins, at least :data:`MIN_RUNNING` of
  them): E_n = (x_i − x̄_other) / (2·u(x_i − x̄_other)), with u² = u_i² + u²(x̄) − 2·cov
  through the terms both share (k = 2 as in ISO 13528 / ISO/IEC 17043). |E_n| > 1 is flagged.
  Records that name no chain form their own group, :data:`NO_CHAIN`: never compared;
* **step test** — at every recalibration of a chain (the first run that uses a calibration
  identifier — a data file's SHA-256 or a typed-in source — that the same input has not used
  before, :mod:`budget.logbook.recal`), the weighted mean of the runs that used the previous
  calibration of that input against the mean of the runs that used the new one, E_n of the
  difference (the two means share terms, so their covariance is subtracted). A recalibration
  of another input does not cut these windows, except one whose own step is flagged (taken
  greedily: recalibrations not contradicted by another chain first, then by |E_n|), so one
  step is not counted twice. |E_n| > 1 is flagged, naming the calibration(s) that changed.
  The other chain's step is reported beside it: its own test where it took the same
  calibration, else its runs over the same dates (cut only at its own flagged recalibrations
  of calibrations this chain does not use). A step in one chain only points at that chain's
  reference, a step in both at the pump or a shared term.

With pure noise about 4.6 % of |E_n| exceed 1 (|z| > 2 for a normal variable): a run flag
alone is a prompt to look, a step flag with a named calibration is the finding.
"""

from __future__ import annotations

import hashlib
import math
from bisect import bisect_right
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from ..errors import DataError
from .gls import MeanStats, mean_stats, running_means
from .recal import chain_calibrations
from .steps import (
    K_EN,
    MIN_STEP,
    SAME_CALIBRATION,
    ChainRuns,
    Recalibration,
    StepTest,
    chain_steps,
    en_of,
    finish_steps,
    new_ids,
    recalibration_of,
    run_step_test,
    sums_of,
)
from .store import Series

__all__ = ["Point", "ChainSummary", "Recalibration", "StepTest", "Flag", "Trend",
           "compute_trend", "MIN_RUNNING", "MIN_STEP", "K_EN"]

K_TOLERANCE = 0.05   # a stated k farther than 5 % from 2 gets E_n on its stated U too
EN_BASIS_TEXT = ("E_n uses U = 2u for every run and mean (k = 2; ISO 13528, ISO/IEC 17043), "
                 "as `budget compare --en-basis 2u`; compare's default uses each record's "
                 "stated U, and a run whose stated k differs from 2 by more than 5 % also gets "
                 "its E_n on its stated U (en_stated_U)")
NO_CHAIN = "(no chain)"   # the group of records that name no chain
MIN_RUNNING = 3     # runs of the other chain before its running mean is used
_D_FLOOR = 1e-6     # smallest non-shared share of u_i² kept (a run made only of shared terms)


@dataclass(frozen=True)
class Point:
    id: int
    chain: str
    date_start: str
    date_end: str
    title: str
    value: float
    standard_uncertainty: float
    expanded_uncertainty: float       # as stated in the record
    coverage_factor: float

    def to_dict(self) -> dict[str, Any]:
        return dict(self.__dict__)


@dataclass(frozen=True)
class ChainSummary:
    chain: str
    mean: MeanStats
    caution: str = ""                 # e.g. the mean pools runs across a flagged step

    def to_dict(self) -> dict[str, Any]:
        return {"chain": self.chain, **self.mean.to_dict(), "caution": self.caution}


@dataclass(frozen=True)
class Flag:
    """One alarm: the chain, the dates, the statistic and the calibration it points at."""

    kind: str                         # "step", "step not tested" or "run-vs-other-chain"
    chain: str
    date_from: str
    date_to: str
    statistic: str                    # "E_n"
    value: float | None               # None for a recalibration that could not be tested
    difference: float | None
    expanded_uncertainty: float | None  # 2·u of the difference
    runs: tuple[int, ...]
    calibrations: tuple[dict[str, Any], ...]
    message: str

    def to_dict(self) -> dict[str, Any]:
        d = dict(self.__dict__)
        d["runs"], d["calibrations"] = list(self.runs), [dict(c) for c in self.calibrations]
        return d


@dataclass(frozen=True)
class Trend:
    measurand: str
    unit: str
    points: tuple[Point, ...]
    chains: tuple[ChainSummary, ...]
    steps: tuple[StepTest, ...]
    run_checks: tuple[dict[str, Any], ...]     # every run's E_n against the other chain
    flags: tuple[Flag, ...]
    notes: tuple[str, ...] = field(default=())
    en_basis: str = "2u"              # E_n with U = 2u throughout (compare --en-basis 2u)
    #: the season's false-alarm expectation (see :func:`false_alarms`)
    false_alarms: dict[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        return {"measurand": self.measurand, "unit": self.unit, "en_basis": self.en_basis,
                "en_basis_text": EN_BASIS_TEXT, "false_alarms": dict(self.false_alarms),
                "points": [p.to_dict() for p in self.points],
                "chains": [c.to_dict() for c in self.chains],
                "step_tests": [s.to_dict() for s in self.steps],
                "run_checks": [dict(r) for r in self.run_checks],
                "flags": [f.to_dict() for f in self.flags], "notes": list(self.notes)}


# --------------------------------------------------------------------------- building blocks
def _one_unit(series: Series, notes: list[str]) -> tuple[Series, list[str]]:
    """The series in one unit: the newest record's; records in another unit of the same
    dimension (ppm and µA/A, A and pA) converted, another dimension refused."""
    from ..units import UnitError, display_factor, parse_unit
    target = series.rows[-1].unit
    if all(r.unit == target for r in series.rows):
        return series, [target]
    try:
        want = parse_unit(target or "1")
        have = {u: parse_unit(u or "1") for u in {r.unit for r in series.rows}}
    except UnitError:
        have = None
    if have is None or any(h.dims != want.dims for h in have.values()):
        units = sorted({r.unit for r in series.rows})
        raise DataError(f"'{series.measurand}' is stored in units of different dimensions "
                        f"({', '.join(units)}); a trend needs one", field="--measurand")
    f = {u: display_factor(h, want) for u, h in have.items()}
    by_id = {r.id: f[r.unit] for r in series.rows}
    rows = tuple(replace(r, unit=target, value=r.value * f[r.unit],
                         standard_uncertainty=r.standard_uncertainty * f[r.unit],
                         expanded_uncertainty=r.expanded_uncertainty * f[r.unit])
                 for r in series.rows)
    terms = tuple((rid, c * by_id.get(rid, 1.0), key) for rid, c, key in series.terms)
    notes.append(f"records stated in other units ({', '.join(sorted(set(f) - {target}))}) "
                 f"were converted to {target or '1'}")
    return replace(series, rows=rows, terms=terms), [target]


def _typed_in_shared(series: Series, notes: list[str]) -> Series:
    """Typed-in inputs without ``shared_as`` that two or more runs took from the same source
    text (the identity the step test already uses for that calibration): one shared term, as
    the same certificate's error is the same in every run that used it (GUM F.1.2.3; common
    practice). Without a source text (identified by its numbers only) they stay independent,
    as in ``compare``."""
    source = {(rid, inp): ident for rid, inp, kind, _m, ident, _p, _d in series.calibrations
              if kind == "typed in" and not ident.startswith("typed in: ")}
    extra, users = [], {}
    for rid, c, name in series.unkeyed:
        ident = source.get((rid, name))
        if ident is not None:
            key = "typed-source:" + hashlib.sha256(repr((name, ident)).encode()).hexdigest()[:32]
            extra.append((rid, c, key))
            users.setdefault((name, ident), set()).add(rid)
    shared = {k for k, v in users.items() if len(v) > 1}
    if not shared:
        return series
    notes.append(f"{len(shared)} typed-in input(s) without shared_as taken from the same source "
                 "text in two or more runs (" + "; ".join(f"{n}: “{i}”, {len(users[(n, i)])} runs"
                                                         for n, i in sorted(shared)) +
                 ") are carried as one shared term each (the same certificate's error in every "
                 "run); declare shared_as to say so, or give each run's certificate its own "
                 "source text if they are independent")
    return replace(series, terms=series.terms + tuple(extra))


def _shared_matrix(series: Series, ids: Sequence[int]) -> np.ndarray:
    """B[i, k]: signed contribution of run i to shared term k (keys in ≥ 2 of the runs)."""
    pos = {rid: i for i, rid in enumerate(ids)}
    holders: dict[str, set[int]] = {}
    for rid, _c, key in series.terms:
        if rid in pos:
            holders.setdefault(key, set()).add(rid)
    keys = sorted(k for k, h in holders.items() if len(h) > 1)
    col = {k: j for j, k in enumerate(keys)}
    b = np.zeros((len(ids), len(keys)))
    for rid, c, key in series.terms:
        if rid in pos and key in col:
            b[pos[rid], col[key]] += c
    return b


# --------------------------------------------------------------------------- the trend
def compute_trend(series: Series) -> Trend:
    """Points, per-chain weighted means, step tests, run checks and flags (module docstring).

    Raises
    ------
    DataError
        No dated record with this measurand, or the measurand in units of different
        dimensions (other units of one dimension are converted to the newest record's).
    """
    rows = series.rows
    if not rows:
        raise DataError(f"no dated record in the book has the measurand '{series.measurand}'",
                        field="--measurand")
    notes: list[str] = []
    series = _typed_in_shared(series, notes)
    series, units = _one_unit(series, notes)
    rows = series.rows
    if series.undated:
        notes.append(f"{series.undated} record(s) with this measurand have no readable "
                     "[report] measurement_date and are left out")
    pts = [Point(r.id, r.chain or NO_CHAIN, r.date_start, r.date_end, r.title, r.value,
                 r.standard_uncertainty, r.expanded_uncertainty, r.coverage_factor)
           for r in rows]
    bad = [p for p in pts if not p.standard_uncertainty > 0]
    if bad:
        raise DataError(f"record #{bad[0].id} has u = 0 for '{series.measurand}' and cannot be "
                        "weighted", field="standard_uncertainty")
    ids = [p.id for p in pts]
    x = np.array([p.value for p in pts])
    u2 = np.array([p.standard_uncertainty ** 2 for p in pts])
    b = _shared_matrix(series, ids)
    d = u2 - (b * b).sum(axis=1)
    floor = _D_FLOOR * u2
    if np.any(d < floor):
        notes.append(f"{int(np.sum(d < floor))} run(s) consist almost only of shared terms; "
                     "their own variance is floored at 1e-6·u²")
        d = np.maximum(d, floor)
    if b.shape[1]:
        notes.append(f"{b.shape[1]} shared term(s) (same source in two or more runs) carried "
                     "as covariance; correlations between different shared terms are not")
    chains = list(dict.fromkeys(p.chain for p in pts))
    members = {c: [i for i, p in enumerate(pts) if p.chain == c] for c in chains}
    summaries = tuple(ChainSummary(c, mean_stats(sums_of(members[c], x, d, b))) for c in chains)

    cals_by_run: dict[int, dict[tuple[str, str, str], list[dict[str, Any]]]] = {}
    for rid, inp, kind, module, ident, path, cdate in series.calibrations:
        cals_by_run.setdefault(rid, {}).setdefault((inp, kind, module), []).append({
            "input": inp, "kind": kind, "module": module, "identifier": ident, "path": path,
            "calibration_date": cdate})
    data = {}
    for c in chains:
        cc = chain_calibrations(c, [pts[i].id for i in members[c]], cals_by_run)
        notes.extend(cc.notes)
        data[c] = ChainRuns(c, members[c], cc, pts)
    # calibrations a chain took whose own step passed there (pass 1, windows uncut)
    passed: dict[str, set[frozenset[str]]] = {c: set() for c in chains}
    for c in chains:
        for j, ev in enumerate(data[c].cals.events):
            t = run_step_test(data[c], j, [], x, d, b)
            if t.en is not None and not t.flagged:
                passed[c].add(new_ids(ev))
    results = {c: chain_steps(data[c], x, d, b,
                               set().union(*(passed[o] for o in chains
                                           if o not in (c, NO_CHAIN))))
               for c in chains}
    real = [c for c in chains if c != NO_CHAIN]
    if NO_CHAIN in chains:
        notes.append(f"{len(members[NO_CHAIN])} record(s) name no chain ([model] chain or "
                     f"[report] method): they form their own group '{NO_CHAIN}', have no step "
                     "tests and are neither compared with a chain nor a chain with them")
    steps: list[StepTest] = []
    for c in real:
        steps.extend(finish_steps(data[c], results[c],
                                  [(data[o], results[o]) for o in real if o != c], x, d, b))
    flags: list[Flag] = []
    for s in steps:
        if s.flagged:
            r = s.recalibration
            where = "; ".join(_compared(o) for o in s.others) or "no other chain to compare"
            extra = ""
            if s.spans:
                extra = "; the window also spans " + ", ".join(s.spans)
            flags.append(Flag(
                "step", r.chain, r.date_from, r.date_to, "E_n", s.en, s.difference,
                K_EN * s.standard_uncertainty, (r.after_id, r.before_id), r.calibrations,
                f"{r.chain}: the mean moved by {s.difference:+.3g} {_unit(units[0])}"
                f"(E_n = {s.en:.2f}; {s.before.n} runs before, {s.after.n} after) across the "
                f"recalibration between {r.date_from} and {r.date_to}: {r.label()}; "
                f"{where}{extra}"))
    checks = _run_checks(chains, members, pts, x, d, b, data, results)
    for ch in checks:
        if ch["en"] is not None and abs(ch["en"]) > 1:
            p = pts[ch["_index"]]
            cal, was_flagged = ch["_recal"]
            stated = ("" if ch.get("en_stated_U") is None else
                      f"; on its stated U, k = {ch['stated_coverage_factor']:.3g}: "
                      f"E_n = {ch['en_stated_U']:.2f}")
            named = ""
            if cal is not None:
                named = (f"; the chain's latest flagged step before it: {cal.label()}"
                         if was_flagged else
                         f"; the chain's latest recalibration before it: {cal.label()}")
            flags.append(Flag(
                "run-vs-other-chain", p.chain, p.date_start, p.date_end, "E_n", ch["en"],
                ch["difference"], ch["expanded_uncertainty"], (p.id,),
                cal.calibrations if cal else (),
                f"run #{p.id} ({p.chain}, {p.date_start}) differs from the running weighted "
                f"mean of {ch['against']} ({ch['runs_in_mean']} runs) by "
                f"{ch['difference']:+.3g} {_unit(units[0])}(E_n = {ch['en']:.2f}{stated}){named}"))
    off_k = [p for p in pts if abs(p.coverage_factor - K_EN) > K_TOLERANCE * K_EN]
    if off_k:
        notes.append(f"{len(off_k)} run(s) state a coverage factor more than 5 % from 2 ("
                     + ", ".join(f"#{p.id}: k = {p.coverage_factor:.3g}" for p in off_k[:10])
                     + (", …" if len(off_k) > 10 else "") + "): E_n here uses 2u for them; "
                     "their run checks also give en_stated_U, E_n on their stated U as "
                     "compare's default does")
    clean = tuple({k: v for k, v in ch.items() if not k.startswith("_")} for ch in checks)
    summaries = tuple(_caution(c, steps) for c in summaries)
    for s in steps:
        if s.en is None:
            r = s.recalibration
            flags.append(Flag(
                "step not tested", r.chain, r.date_from, r.date_to, "E_n", None, None, None,
                (r.after_id, r.before_id), r.calibrations,
                f"{r.chain}: the recalibration between {r.date_from} and {r.date_to} "
                f"({r.label()}) is {s.note} — a step there would go unseen"))
    return Trend(series.measurand, units[0], tuple(pts), summaries, tuple(steps), clean,
                 tuple(flags), tuple(notes),
                 false_alarms=false_alarms(sum(s.en is not None for s in steps),
                                           sum(c["en"] is not None for c in clean)))


#: P(|E_n| > 1) for one test of pure noise: P(|z| > 2) = erfc(√2) (normal distribution)
P_FALSE = math.erfc(math.sqrt(2.0))


def false_alarms(n_steps: int, n_runs: int) -> dict[str, Any]:
    """How many flags pure noise would raise in this trend: with m tests, each false with
    probability p = P(|z| > 2) ≈ 0.0455, m·p expected and 1 − (1 − p)^m the chance of at
    least one (tests taken as independent; run checks against running means are positively
    correlated, so for them this is an upper bound on the chance, common practice)."""
    p = P_FALSE

    def one(m: int) -> dict[str, Any]:
        return {"tests": m, "expected": m * p, "p_at_least_one": 1 - (1 - p) ** m}

    steps, runs = one(n_steps), one(n_runs)
    text = (f"with pure noise each test exceeds |E_n| = 1 with p = {p:.4f}: of "
            f"{n_steps} step test(s) {steps['expected']:.2f} false step flag(s) are expected "
            f"and P(at least one) = {steps['p_at_least_one']:.0%}; of {n_runs} run check(s) "
            f"{runs['expected']:.1f} false run flag(s), P(at least one) = "
            f"{runs['p_at_least_one']:.0%} (tests taken as independent). A single flag is a "
            "prompt to look; a step flag that the other chains do not share, at a "
            "calibration of this chain only, with |E_n| well above 1, is the finding")
    return {"p_per_test": p, "step_tests": steps, "run_checks": runs, "text": text}


def _caution(c: ChainSummary, steps: Sequence[StepTest]) -> ChainSummary:
    """A chain mean that pools runs across a flagged step is not one value: say so."""
    flagged = [s for s in steps if s.flagged and s.recalibration.chain == c.chain]
    if not flagged:
        return c
    return replace(c, caution="this mean pools runs across flagged step(s) (" + "; ".join(
        f"{s.recalibration.date_to[:10]}, E_n = {s.en:.2f}" for s in flagged) +
        "): it is not one value of the measurand; see the means before and after in the "
        "step tests")


def _compared(o: dict[str, Any]) -> str:
    """What another chain's step across the same recalibration says (flag text)."""
    c, en = o["chain"], o["en"]
    if en is None:
        return o["note"]
    if o["note"] == SAME_CALIBRATION and abs(en) <= 1:
        return (f"this calibration is also used by {c}, whose own step at it passed "
                f"(E_n = {en:.2f}): the step is unlikely to come from this calibration — look "
                "for another change in this chain in the window")
    if abs(en) <= 1:
        return f"the other chain {c} did not step (E_n = {en:.2f})"
    return f"the other chain {c} stepped too (E_n = {en:.2f}): a change common to both"


def _unit(unit: str) -> str:
    return f"{unit} " if unit not in ("", "1") else ""


def _run_checks(chains, members, pts, x, d, b, data, results) -> list[dict[str, Any]]:
    """Each run against the running weighted mean of all the other chains (module docstring);
    runs of no chain are not checked."""
    out = []
    real = [c for c in chains if c != NO_CHAIN]
    for c in chains:
        others = [o for o in real if o != c] if c != NO_CHAIN else []
        oidx = np.asarray(sorted(i for o in others for i in members[o]), dtype=int)
        ends = [pts[i].date_end for i in oidx]
        ch = data[c]
        tests, accepted = results[c]
        recals = sorted(((ch.starts[t.event.first], j) for j, t in tests.items()))
        cuts = [r[0] for r in recals]
        recs = {j: recalibration_of(ch, t) for j, t in tests.items()}
        counts, k = [], 0
        for i in members[c]:          # runs of the other chains ended before this one began
            while k < len(ends) and ends[k] <= pts[i].date_start:
                k += 1
            counts.append(k)
        counts = np.asarray(counts, dtype=int)
        use = counts >= MIN_RUNNING
        if use.any():
            mean, w, g = running_means(x[oidx], d[oidx], b[oidx], counts[use])
        j = 0
        for i, n in zip(members[c], counts):
            p = pts[i]
            nb = bisect_right(cuts, p.date_start)
            flagged = [e for _, e in recals[:nb] if e in accepted]
            pick = flagged[-1] if flagged else (recals[nb - 1][1] if nb else None)
            recal = (None, False) if pick is None else (recs[pick], bool(flagged))
            rec = {"id": p.id, "chain": c, "against": " + ".join(others),
                   "against_chains": list(others), "runs_in_mean": int(n),
                   "en": None, "difference": None, "expanded_uncertainty": None,
                   "_index": i, "_recal": recal}
            if n >= MIN_RUNNING:
                diff = float(x[i] - mean[j])
                cov = float(b[i] @ g[j]) / w[j] if b.shape[1] else 0.0
                en, u = en_of(diff, p.standard_uncertainty ** 2 + 1 / w[j] - 2 * cov)
                rec.update(en=en, difference=diff, expanded_uncertainty=K_EN * u)
                k = p.coverage_factor
                if abs(k - K_EN) > K_TOLERANCE * K_EN:
                    # the run with its stated U = k·u, the mean with 2u (it states no k):
                    # U² = k²u_i² + 2²u²(x̄) − 2·k·2·cov (compare's "stated" basis)
                    big2 = (k * p.standard_uncertainty) ** 2 + K_EN ** 2 / w[j] \
                        - 2 * k * K_EN * cov
                    rec["en_stated_U"] = diff / math.sqrt(big2) if big2 > 0 else None
                    rec["stated_coverage_factor"] = k
                j += 1
            out.append(rec)
    return out


def elsewhere_note(trend: Trend, entries: Sequence[Any]) -> str | None:
    """A note on records of the trend's chains that do not have its measurand but one of the
    same dimension under another output name (``dev_1e8`` beside ``dev_ppm``): they are left
    out of the trend, which says so. ``entries``: :meth:`Logbook.entries` of the book."""
    from ..units import UnitError, parse_unit

    def dims(unit: str):
        try:
            return parse_unit(unit or "1").dims
        except UnitError:
            return ("unit", unit)

    want = dims(trend.unit)
    chains = {p.chain for p in trend.points}
    names: dict[str, int] = {}
    count = 0
    for e in entries:
        ms = e.measurands
        if (e.chain or NO_CHAIN) not in chains or any(m["name"] == trend.measurand for m in ms):
            continue
        same = [m["name"] for m in ms if dims(m["unit"]) == want]
        if same:
            count += 1
            for n in same:
                names[n] = names.get(n, 0) + 1
    if not count:
        return None
    listed = ", ".join(f"{n}: {c}" for n, c in sorted(names.items()))
    return (f"{count} record(s) of these chains have no '{trend.measurand}' but a measurand of "
            f"the same dimension under another name ({listed}): they are left out of this "
            "trend; trend them with --measurand, or keep one output name")
