"""Step tests at recalibrations: windows per input, the greedy cut at flagged steps, the other
chain's step across the same recalibration (see :mod:`budget.logbook.trend`)."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from functools import cached_property
from typing import Any

import numpy as np

from .gls import MeanStats, Sums, cov_of_means, mean_stats
from .recal import ChainCals, Event

__all__ = ["Recalibration", "StepTest", "K_EN", "MIN_STEP"]

K_EN = 2.0          # coverage factor of E_n (ISO 13528, ISO/IEC 17043)
MIN_STEP = 2        # runs on each side of a recalibration for a step test
SAME_CALIBRATION = "the other chain's own step test at the same calibration"


def sums_of(idx: Sequence[int], x: np.ndarray, d: np.ndarray, b: np.ndarray) -> Sums:
    i = np.asarray(idx, dtype=int)
    return Sums.of(x[i], d[i], b[i])


def en_of(diff: float, var: float) -> tuple[float | None, float]:
    if var <= 0:
        return None, 0.0
    u = math.sqrt(var)
    return diff / (K_EN * u), u


def _cal_text(c: dict[str, Any]) -> str:
    if c["kind"] == "file":
        when = f", last calibration {c['calibration_date']}" if c["calibration_date"] else ""
        return f"{c['input']}: {c['path']} (sha256 {c['identifier'][:12]}…{when})"
    return f"{c['input']}: typed in, source “{c['identifier']}”"





@dataclass(frozen=True)
class Recalibration:
    """Calibrations of a chain that took a new identity (:mod:`budget.logbook.recal`)."""

    chain: str
    after_id: int                     # last run with the old calibration (before the new)
    before_id: int                    # first run with the new one
    date_from: str                    # end of the last old run (at most date_to)
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
    other_note: str = ""              # how the other chain's step was had, or why not
    cut_by: tuple[str, ...] = ()      # flagged recalibrations of other inputs that cut it
    spans: tuple[str, ...] = ()       # other recalibrations inside the window (not cut)
    #: every chain compared: {"chain", "en", "note"} (other_chain/other_en: the first one)
    others: tuple[dict[str, Any], ...] = ()

    @property
    def flagged(self) -> bool:
        return self.en is not None and abs(self.en) > 1.0

    def to_dict(self) -> dict[str, Any]:
        return {"recalibration": self.recalibration.to_dict(),
                "before": None if self.before is None else self.before.to_dict(),
                "after": None if self.after is None else self.after.to_dict(),
                "difference": self.difference, "standard_uncertainty": self.standard_uncertainty,
                "en": self.en, "flagged": self.flagged, "other_chain": self.other_chain,
                "other_chain_en": self.other_en, "other_chain_note": self.other_note,
                "other_chains": [dict(o) for o in self.others],
                "note": self.note, "window_cut_at": list(self.cut_by),
                "window_spans": list(self.spans),
                "date_first": self.date_first, "date_last": self.date_last}


@dataclass(frozen=True)
class ChainRuns:
    """One chain's runs (indices into the points, in date order) and their calibrations."""

    name: str
    idx: list[int]
    cals: ChainCals
    pts: list[Any]                     # the trend's points (trend.Point)

    @cached_property
    def starts(self) -> list[str]:
        return [self.pts[i].date_start for i in self.idx]

    def uses(self) -> set[str]:
        """Every calibration identifier any run of the chain used."""
        return {v for s in self.cals.slots for t in self.cals.ident[s] if t for v in t}


@dataclass
class _Test:
    event: Event
    before: list[int]                 # positions in the chain
    after: list[int]
    cut_by: list[int]                 # event numbers whose recalibration cut the window
    mb: MeanStats | None = None
    ma: MeanStats | None = None
    diff: float | None = None
    u: float | None = None
    en: float | None = None

    @property
    def flagged(self) -> bool:
        return self.en is not None and abs(self.en) > 1.0


def _windows(ch: ChainRuns, ev: Event) -> tuple[list[int], list[int]]:
    """Runs that used the previous identities (measured no later than the first new run) and
    runs that used the new ones."""
    cc, starts = ch.cals, ch.starts
    t = starts[ev.first]
    n = len(ch.idx)
    before = [p for p in range(n) if starts[p] <= t and
              all(cc.ident[s][p] == o for s, o in zip(ev.slots, ev.olds))]
    after = [p for p in range(n) if all(cc.ident[s][p] == w for s, w in zip(ev.slots, ev.news))]
    return before, after


def _cut(ch: ChainRuns, ev: Event, cut: Event, before: list[int], after: list[int]
         ) -> tuple[list[int], list[int]]:
    """Keep the window on one side of another input's recalibration ``cut``."""
    ep = ch.cals.epoch[cut.slots[0]]
    k = cut.epochs[0]
    starts = ch.starts
    if starts[ev.first] >= starts[cut.first]:
        return [p for p in before if ep[p] >= k], after
    return before, [p for p in after if ep[p] < k]


def run_step_test(ch: ChainRuns, j: int, cuts: list[int], x, d, b) -> _Test:
    ev = ch.cals.events[j]
    before, after = _windows(ch, ev)
    used = []
    for c in cuts:
        if c == j:
            continue
        nb, na = _cut(ch, ev, ch.cals.events[c], before, after)
        if (nb, na) != (before, after):
            used.append(c)
        before, after = nb, na
    t = _Test(ev, before, after, used)
    if len(before) >= MIN_STEP and len(after) >= MIN_STEP:
        t.mb, t.ma = (mean_stats(sums_of([ch.idx[p] for p in s], x, d, b))
                      for s in (before, after))
        t.diff = t.ma.value - t.mb.value
        t.en, t.u = en_of(t.diff, 1 / t.ma.weight + 1 / t.mb.weight
                        - 2 * cov_of_means(t.ma, t.mb))
    return t


def new_ids(ev: Event) -> frozenset[str]:
    return frozenset(v for w in ev.news if w for v in w)


def chain_steps(ch: ChainRuns, x, d, b, passed_elsewhere: set[frozenset[str]]
                 ) -> tuple[dict[int, _Test], list[int]]:
    """Every recalibration's step test, windows bounded by recalibrations of the same inputs;
    then, greedily, a flagged step cuts the windows of the other inputs' tests (so a step is
    counted at one recalibration only): first the recalibrations not contradicted by another
    chain (a calibration another chain also took, whose own step there passed, is taken
    last), each group by |E_n|. Returns the tests and the accepted (flagged) events in order."""
    n = len(ch.cals.events)
    tests = {j: run_step_test(ch, j, [], x, d, b) for j in range(n)}
    accepted: list[int] = []
    while True:
        cand = [j for j in range(n) if j not in accepted and tests[j].flagged]
        if not cand:
            break
        best = max(cand, key=lambda j: (new_ids(ch.cals.events[j]) not in passed_elsewhere,
                                        abs(tests[j].en), -j))
        accepted.append(best)
        for j in range(n):
            if j not in accepted:
                tests[j] = run_step_test(ch, j, accepted, x, d, b)
    return tests, accepted


def recalibration_of(ch: ChainRuns, t: _Test) -> Recalibration:
    ev = t.event
    starts = ch.starts
    first_new = ch.pts[ch.idx[ev.first]]
    olds = [p for p in (t.before or _windows(ch, ev)[0])]
    last_old = ch.pts[ch.idx[max(olds, key=lambda p: (starts[p], p))]] if olds else \
        ch.pts[ch.idx[ev.first - 1]]
    return Recalibration(ch.name, last_old.id, first_new.id,
                         min(last_old.date_end, first_new.date_start), first_new.date_start,
                         ev.calibrations)


def _other_step(ch: ChainRuns, t: _Test, other: ChainRuns, other_res, x, d, b
                ) -> tuple[float | None, str]:
    """The other chain's step across the same recalibration: its own test of the same
    calibration when it had it too; else its runs over the same dates split at the first new
    run, cut only at the other chain's own flagged recalibrations of calibrations this chain
    does not use."""
    tests, accepted = other_res
    new = new_ids(t.event)
    for ot in tests.values():
        if new and new_ids(ot.event) == new:
            if ot.en is None:
                return None, (f"the other chain ({other.name}) had the same recalibration, "
                              f"with too few runs to test ({len(ot.before)} before, "
                              f"{len(ot.after)} after)")
            return ot.en, SAME_CALIBRATION
    starts = ch.starts
    first = min(starts[p] for p in t.before)
    last = max(ch.pts[ch.idx[p]].date_end for p in t.after)
    at = starts[t.event.first]
    ostarts = other.starts
    ob = [q for q in range(len(other.idx)) if first <= ostarts[q] < at]
    oa = [q for q in range(len(other.idx)) if at <= ostarts[q] <= last]
    mine = ch.uses()
    cut = []
    for j in accepted:
        oe = other.cals.events[j]
        if new_ids(oe) & mine:
            continue                  # a calibration both chains use: it must not cut
        ep, k = other.cals.epoch[oe.slots[0]], oe.epochs[0]
        nb, na = ((([q for q in ob if ep[q] >= k], oa)) if ostarts[oe.first] <= at else
                  (ob, [q for q in oa if ep[q] < k]))
        if (nb, na) != (ob, oa):
            cut.append(recalibration_of(other, tests[j]).label())
        ob, oa = nb, na
    why = (f"; its window cut at its own flagged recalibration(s): {', '.join(cut)}"
           if cut else "")
    if len(ob) < MIN_STEP or len(oa) < MIN_STEP:
        return None, (f"the other chain ({other.name}) has too few runs over the same dates "
                      f"({len(ob)} before, {len(oa)} after; at least {MIN_STEP} each side)"
                      f"{why}")
    mb, ma = (mean_stats(sums_of([other.idx[q] for q in s], x, d, b)) for s in (ob, oa))
    en, _ = en_of(ma.value - mb.value, 1 / ma.weight + 1 / mb.weight - 2 * cov_of_means(ma, mb))
    return en, (f"the other chain's runs over the same dates ({len(ob)} before, "
                f"{len(oa)} after){why}")


def _state(t: _Test) -> str:
    if t.en is None:
        return "its own step not tested"
    return f"its own step E_n = {t.en:.2f}{', flagged' if t.flagged else ''}"


def finish_steps(ch: ChainRuns, res, others: list[tuple[ChainRuns, Any]], x, d, b
                 ) -> list[StepTest]:
    """The StepTests of one chain, each with the step of every other chain in ``others``
    ((chain, its chain_steps result) pairs) across the same recalibration."""
    tests, _accepted = res
    out = []
    for j in sorted(tests, key=lambda j: tests[j].event.first):
        t = tests[j]
        r = recalibration_of(ch, t)
        cut_by = tuple(recalibration_of(ch, tests[c]).label() for c in t.cut_by)
        win = t.before + t.after
        lo, hi = (min(win), max(win)) if win else (t.event.first, t.event.first)
        spans = tuple(f"{recalibration_of(ch, tests[k]).label()} ({ch.starts[e.first][:10]}; "
                      f"{_state(tests[k])})"
                      for k, e in enumerate(ch.cals.events)
                      if k != j and k not in t.cut_by and lo < e.first <= hi)
        first = ch.pts[ch.idx[lo]].date_start
        last = ch.pts[ch.idx[hi]].date_end
        name = ", ".join(o.name for o, _ in others)
        cut_txt = (f"; window cut at the flagged recalibration(s) {', '.join(cut_by)}"
                   if cut_by else "")
        if t.en is None:
            out.append(StepTest(r, None, None, None, None, None, name, None,
                                f"not tested: {len(t.before)} run(s) before and "
                                f"{len(t.after)} after (at least {MIN_STEP} each side)"
                                f"{cut_txt}", first, last, "", cut_by, spans))
            continue
        cmp = []
        for o, o_res in others:
            en, note = _other_step(ch, t, o, o_res, x, d, b)
            cmp.append({"chain": o.name, "en": en, "note": note})
        other_en, other_note = ((cmp[0]["en"], cmp[0]["note"]) if len(cmp) == 1 else
                                (None, "no other chain to compare") if not cmp else
                                (None, f"{len(cmp)} other chains: see other_chains"))
        out.append(StepTest(r, t.mb, t.ma, t.diff, t.u, t.en, name, other_en, cut_txt[2:],
                            first, last, other_note, cut_by, spans, tuple(cmp)))
    return out
