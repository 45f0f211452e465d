"""Trend and control: one measurand against measurement date, per chain, with the alarms.

Given a :class:`~budget.logbook.store.Series` (what the book holds of one measurand):

* **points** — each run's value with its expanded uncertainty U as stated, grouped by chain;
* **weighted mean per chain** — generalised least squares with the shared terms' covariance
  and the generalised χ², ν = N − 1, p and Birge ratio (:mod:`budget.logbook.gls`);
* **control rule** — each run against the *running* weighted mean of the other chain (every
  run of the other chain measured before this one begins, at least :data:`MIN_RUNNING` of them):
  E_n = (x_i − x̄_other) / (2·u(x_i − x̄_other)), with u² = u_i² + u²(x̄) − 2·cov through the
  terms both chains share (k = 2 as in ISO 13528 / ISO/IEC 17043). |E_n| > 1 is flagged;
* **step test** — at every recalibration of a chain (a calibration identifier — a data file's
  SHA-256 or a typed-in source — that changes between two consecutive runs of that chain), the
  weighted mean of the chain's runs since its previous recalibration against the mean of its
  runs until its next one, E_n of the difference (the two means share terms, so their
  covariance is subtracted). |E_n| > 1 is flagged, naming the calibration(s) that changed at
  that date. The other chain's step across the same dates is reported beside it: a step in
  one chain only points at that chain's reference, a step in both at the pump or a shared term.

With pure noise about 4.6 % of |E_n| exceed 1 (|z| > 2 for a normal variable): a run flag
alone is a prompt to look, a step flag with a named calibration is the finding.
"""

from __future__ import annotations

import math
from bisect import bisect_left, bisect_right
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from ..errors import DataError
from .gls import MeanStats, Sums, cov_of_means, mean_stats, running_means
from .store import Series

__all__ = ["Point", "ChainSummary", "Recalibration", "StepTest", "Flag", "Trend",
           "compute_trend", "MIN_RUNNING", "MIN_STEP", "K_EN"]

K_EN = 2.0          # coverage factor of E_n (ISO 13528, ISO/IEC 17043)
MIN_RUNNING = 3     # runs of the other chain before its running mean is used
MIN_STEP = 2        # runs on each side of a recalibration for a step test
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

    def to_dict(self) -> dict[str, Any]:
        return {"chain": self.chain, **self.mean.to_dict()}


@dataclass(frozen=True)
class Recalibration:
    """Calibrations of a chain that changed between two consecutive runs."""

    chain: str
    after_id: int                     # last run with the old calibration
    before_id: int                    # first run with the new one
    date_from: str                    # end of the last old run
    date_to: str                      # start of the first new run
    calibrations: tuple[dict[str, Any], ...]   # input, kind, identifier, previous, date, path

    def label(self) -> str:
        return "; ".join(_cal_text(c) for c in self.calibrations)

    def to_dict(self) -> dict[str, Any]:
        return {"chain": self.chain, "last_run_before": self.after_id,
                "first_run_after": self.before_id, "date_from": self.date_from,
                "date_to": self.date_to, "calibrations": [dict(c) for c in self.calibrations]}


@dataclass(frozen=True)
class StepTest:
    recalibration: Recalibration
    before: MeanStats | None
    after: MeanStats | None
    difference: float | None          # after − before
    standard_uncertainty: float | None
    en: float | None
    other_chain: str
    other_en: float | None            # the other chain's step across the same dates
    note: str
    date_first: str                   # first run before the recalibration (of the window)
    date_last: str                    # last run after it

    @property
    def flagged(self) -> bool:
        return self.en is not None and abs(self.en) > 1.0

    def to_dict(self) -> dict[str, Any]:
        return {"recalibration": self.recalibration.to_dict(),
                "before": None if self.before is None else self.before.to_dict(),
                "after": None if self.after is None else self.after.to_dict(),
                "difference": self.difference, "standard_uncertainty": self.standard_uncertainty,
                "en": self.en, "flagged": self.flagged, "other_chain": self.other_chain,
                "other_chain_en": self.other_en, "note": self.note,
                "date_first": self.date_first, "date_last": self.date_last}


@dataclass(frozen=True)
class Flag:
    """One alarm: the chain, the dates, the statistic and the calibration it points at."""

    kind: str                         # "step" or "run-vs-other-chain"
    chain: str
    date_from: str
    date_to: str
    statistic: str                    # "E_n"
    value: float
    difference: float
    expanded_uncertainty: float       # 2·u of the difference
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

    def to_dict(self) -> dict[str, Any]:
        return {"measurand": self.measurand, "unit": self.unit,
                "points": [p.to_dict() for p in self.points],
                "chains": [c.to_dict() for c in self.chains],
                "step_tests": [s.to_dict() for s in self.steps],
                "run_checks": [dict(r) for r in self.run_checks],
                "flags": [f.to_dict() for f in self.flags], "notes": list(self.notes)}


def _cal_text(c: dict[str, Any]) -> str:
    if c["kind"] == "file":
        when = f", last calibration {c['calibration_date']}" if c["calibration_date"] else ""
        return f"{c['input']}: {c['path']} (sha256 {c['identifier'][:12]}…{when})"
    return f"{c['input']}: typed in, source “{c['identifier']}”"


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


def _recalibrations(series: Series, chain: str, pts: list[Point]) -> list[Recalibration]:
    by_run: dict[int, dict[tuple[str, str], dict[str, Any]]] = {}
    for rid, inp, kind, module, ident, path, cdate in series.calibrations:
        by_run.setdefault(rid, {})[(inp, kind)] = {
            "input": inp, "kind": kind, "module": module, "identifier": ident, "path": path,
            "calibration_date": cdate}
    out = []
    for prev, nxt in zip(pts, pts[1:]):
        a, b = by_run.get(prev.id, {}), by_run.get(nxt.id, {})
        changed = []
        for slot, cal in sorted(b.items()):
            if slot in a and a[slot]["identifier"] != cal["identifier"]:
                changed.append({**cal, "previous_identifier": a[slot]["identifier"]})
        if changed:
            out.append(Recalibration(chain, prev.id, nxt.id, prev.date_end, nxt.date_start,
                                     tuple(changed)))
    return out


def _sums(idx: Sequence[int], x: np.ndarray, d: np.ndarray, b: np.ndarray) -> Sums:
    i = np.asarray(idx, dtype=int)
    return Sums.of(x[i], d[i], b[i])


def _en(diff: float, var: float) -> tuple[float | None, float]:
    if var <= 0:
        return None, 0.0
    u = math.sqrt(var)
    return diff / (K_EN * u), u


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
    series, units = _one_unit(series, notes)
    rows = series.rows
    if series.undated:
        notes.append(f"{series.undated} record(s) with this measurand have no readable "
                     "[report] measurement_date and are left out")
    pts = [Point(r.id, r.chain or "(no chain)", r.date_start, r.date_end, r.title, r.value,
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
    summaries = tuple(ChainSummary(c, mean_stats(_sums(members[c], x, d, b))) for c in chains)

    flags: list[Flag] = []
    steps: list[StepTest] = []
    recal_by_chain = {c: _recalibrations(series, c, [pts[i] for i in members[c]])
                      for c in chains}
    for c in chains:
        other = next((o for o in chains if o != c), "")
        steps.extend(_step_tests(c, other, recal_by_chain[c], recal_by_chain.get(other, []),
                                 pts, members, x, d, b))
    for s in steps:
        if s.flagged:
            r = s.recalibration
            where = (f"the other chain ({s.other_chain}) did not step (E_n = {s.other_en:.2f})"
                     if s.other_en is not None and abs(s.other_en) <= 1 else
                     f"the other chain ({s.other_chain}) stepped too (E_n = {s.other_en:.2f}): "
                     "a change common to both" if s.other_en is not None else
                     "no other chain to compare")
            flags.append(Flag(
                "step", r.chain, s.date_first, s.date_last, "E_n", s.en, s.difference,
                K_EN * s.standard_uncertainty, (r.after_id, r.before_id), r.calibrations,
                f"{r.chain}: the mean moved by {s.difference:+.3g} {_unit(units[0])}"
                f"(E_n = {s.en:.2f}) across the recalibration between {r.date_from} and "
                f"{r.date_to}: {r.label()}; {where}"))
    checks = _run_checks(chains, members, pts, x, d, b, recal_by_chain)
    for ch in checks:
        if ch["en"] is not None and abs(ch["en"]) > 1:
            p = pts[ch["_index"]]
            cal = ch["_recal"]
            named = (f"; the chain's latest recalibration before it: {cal.label()}"
                     if cal else "")
            flags.append(Flag(
                "run-vs-other-chain", p.chain, p.date_start, p.date_end, "E_n", ch["en"],
                ch["difference"], ch["expanded_uncertainty"], (p.id,),
                cal.calibrations if cal else (),
                f"run #{p.id} ({p.chain}, {p.date_start}) differs from the running weighted "
                f"mean of {ch['against']} ({ch['runs_in_mean']} runs) by "
                f"{ch['difference']:+.3g} {_unit(units[0])}(E_n = {ch['en']:.2f}){named}"))
    clean = tuple({k: v for k, v in ch.items() if not k.startswith("_")} for ch in checks)
    return Trend(series.measurand, units[0], tuple(pts), summaries, tuple(steps), clean,
                 tuple(flags), tuple(notes))


def _unit(unit: str) -> str:
    return f"{unit} " if unit not in ("", "1") else ""


def _step_tests(chain: str, other: str, recals: list[Recalibration],
                other_recals: list[Recalibration], pts: list[Point],
                members: dict[str, list[int]], x, d, b) -> list[StepTest]:
    idx = members[chain]
    pos = {pts[i].id: k for k, i in enumerate(idx)}
    other_starts = [pts[i].date_start for i in members.get(other, [])]   # sorted by date
    other_cuts = [o.date_to for o in other_recals]
    cuts = [pos[r.before_id] for r in recals]
    out = []
    for j, r in enumerate(recals):
        lo = cuts[j - 1] if j else 0
        hi = cuts[j + 1] if j + 1 < len(cuts) else len(idx)
        before, after = idx[lo:cuts[j]], idx[cuts[j]:hi]
        first, last = pts[before[0]].date_start, pts[after[-1]].date_end
        if len(before) < MIN_STEP or len(after) < MIN_STEP:
            out.append(StepTest(r, None, None, None, None, None, other, None,
                             f"not tested: {len(before)} run(s) before and {len(after)} after "
                             f"(at least {MIN_STEP} each side)", first, last))
            continue
        mb, ma = (mean_stats(_sums(s, x, d, b)) for s in (before, after))
        diff = ma.value - mb.value
        en, u = _en(diff, 1 / ma.weight + 1 / mb.weight - 2 * cov_of_means(ma, mb))
        other_en = None
        if other:
            # the other chain's runs over the same window, split at the first new run and
            # bounded by the other chain's own recalibrations (its own steps stay out)
            k = bisect_right(other_cuts, r.date_to)
            lo_d = max(first, other_cuts[k - 1]) if k else first
            hi_d = min(last + "~", other_cuts[k]) if k < len(other_cuts) else last + "~"
            a = bisect_left(other_starts, lo_d)
            m = bisect_left(other_starts, r.date_to)
            z = bisect_left(other_starts, hi_d)
            ob, oa = members[other][a:m], members[other][m:z]
            if len(ob) >= MIN_STEP and len(oa) >= MIN_STEP:
                ob_s, oa_s = (mean_stats(_sums(s, x, d, b)) for s in (ob, oa))
                other_en, _ = _en(oa_s.value - ob_s.value, 1 / oa_s.weight + 1 / ob_s.weight
                                  - 2 * cov_of_means(oa_s, ob_s))
        out.append(StepTest(r, mb, ma, diff, u, en, other, other_en, "", first, last))
    return out


def _run_checks(chains, members, pts, x, d, b, recal_by_chain) -> list[dict[str, Any]]:
    """Each run against the running weighted mean of the other chain (module docstring)."""
    out = []
    if len(chains) < 2:
        return out
    for c in chains:
        other = next(o for o in chains if o != c)
        oidx = np.asarray(members[other], dtype=int)
        ends = [pts[i].date_end for i in oidx]
        recals = recal_by_chain[c]
        cuts = [r.date_to for r in recals]
        counts, k = [], 0
        for i in members[c]:          # runs of the other chain ended before this one began
            while k < len(ends) and ends[k] <= pts[i].date_start:
                k += 1
            counts.append(k)
        counts = np.asarray(counts)
        use = counts >= MIN_RUNNING
        if use.any():
            mean, w, g = running_means(x[oidx], d[oidx], b[oidx], counts[use])
        j = 0
        for i, n in zip(members[c], counts):
            p = pts[i]
            before = bisect_right(cuts, p.date_start)
            recal = recals[before - 1] if before else None
            rec = {"id": p.id, "chain": c, "against": other, "runs_in_mean": int(n),
                   "en": None, "difference": None, "expanded_uncertainty": None,
                   "_index": i, "_recal": recal}
            if n >= MIN_RUNNING:
                diff = float(x[i] - mean[j])
                cov = float(b[i] @ g[j]) / w[j] if b.shape[1] else 0.0
                en, u = _en(diff, p.standard_uncertainty ** 2 + 1 / w[j] - 2 * cov)
                rec.update(en=en, difference=diff, expanded_uncertainty=K_EN * u)
                j += 1
            out.append(rec)
    return out
