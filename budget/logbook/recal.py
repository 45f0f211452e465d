"""Recalibrations of a chain: which calibration each run used, per input, and where it changed.

Each run of a chain names the calibrations it used (a data file's SHA-256, or a typed-in
source text), one *slot* per input: (input name, kind, module). A **recalibration** of a slot
is the first run (in measurement-date order) that uses an identity the slot has not used
before in this chain; a return to an identity used earlier is not a new recalibration (same-day
runs stored out of order cannot make new → old → new events) and is noted.

The windows of a step test are defined by *membership*, not by position: the runs before a
recalibration are the runs that used the previous identity (measured no later than the first
run with the new one), the runs after are those that used the new identity. A recalibration of
any other input does not cut them (:func:`budget.logbook.trend.compute_trend` cuts a window
only at another input's recalibration whose own step test is flagged).

An input renamed between two consecutive runs (``R`` then ``R_new``, e.g. through
``inputs_map``) is taken as the same input when the slots that vanished and those that
appeared are of the same kind and module and equal in number (paired in name order; a note
says so); an input that appears or vanishes unpaired is a change of identity too (its identity
is "none" where it is absent).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

__all__ = ["Event", "ChainCals", "chain_calibrations"]

Slot = tuple[str, str, str]          # (input, kind, module)


@dataclass(frozen=True)
class Event:
    """A recalibration: one or more slots that took a new identity at the same run."""

    first: int                                   # position (in chain order) of the first new run
    slots: tuple[Slot, ...]
    epochs: tuple[int, ...]                      # the new identity's rank in each slot
    olds: tuple[tuple[str, ...] | None, ...]
    news: tuple[tuple[str, ...] | None, ...]
    calibrations: tuple[dict[str, Any], ...]


@dataclass(frozen=True)
class ChainCals:
    """Per-run identities of one chain's slots (positions = the chain's runs in date order)."""

    slots: tuple[Slot, ...]
    ident: dict[Slot, list[tuple[str, ...] | None]]
    epoch: dict[Slot, list[int]]
    events: tuple[Event, ...]
    notes: tuple[str, ...]

    def identities(self, pos: int) -> set[str]:
        """Every calibration identifier the run at ``pos`` used."""
        return {i for s in self.slots for i in (self.ident[s][pos] or ())}


def _name(slot: Slot) -> str:
    return slot[0]


def chain_calibrations(chain: str, run_ids: list[int],
                       cals_by_run: dict[int, dict[Slot, list[dict[str, Any]]]]) -> ChainCals:
    """The slots, identities and recalibration events of one chain.

    Parameters
    ----------
    chain : str
        The chain's name (for notes).
    run_ids : list of int
        The chain's record ids in measurement-date order.
    cals_by_run : dict
        Record id → slot → the calibration rows (dicts) of that slot in that record.
    """
    notes: list[str] = []
    alias: dict[Slot, Slot] = {}
    canon_runs: list[dict[Slot, list[dict[str, Any]]]] = []
    prev: set[Slot] | None = None
    seen: set[Slot] = set()
    last_keys: set[Slot] | None = None
    for pos, rid in enumerate(run_ids):
        raw = cals_by_run.get(rid, {})
        if prev is not None and raw.keys() != last_keys:   # the same inputs: nothing to pair
            appeared = sorted(s for s in raw if s not in alias and s not in seen)
            cur = {alias.get(s, s) for s in raw}
            vanished = sorted(prev - cur)
            groups: dict[tuple[str, str], tuple[list[Slot], list[Slot]]] = {}
            for s in appeared:
                groups.setdefault(s[1:], ([], []))[0].append(s)
            for s in vanished:
                groups.setdefault(s[1:], ([], []))[1].append(s)
            for new, old in groups.values():
                if new and len(new) == len(old):
                    for a, o in zip(new, old):
                        alias[a] = o
                        notes.append(f"{chain}: input {_name(o)} (to run #{run_ids[pos - 1]}) "
                                     f"and {_name(a)} (from run #{rid}) taken as one input "
                                     f"({o[1]}{', ' + o[2] if o[2] else ''}): one replaced "
                                     "the other between consecutive runs")
        if alias:
            canon: dict[Slot, list[dict[str, Any]]] = {}
            for s, rows in raw.items():
                canon.setdefault(alias.get(s, s), []).extend(rows)
        else:
            canon = raw                  # read only from here on
        if raw.keys() != last_keys:
            seen.update(raw)
            last_keys = set(raw)
            prev = set(canon)
        canon_runs.append(canon)
    slots = tuple(sorted({s for c in canon_runs for s in c}))
    ident: dict[Slot, list[tuple[str, ...] | None]] = {}
    epoch: dict[Slot, list[int]] = {}
    first_cal: dict[tuple[Slot, tuple[str, ...] | None], list[dict[str, Any]]] = {}
    by_first: dict[int, list[tuple[Slot, int]]] = {}
    for s in slots:
        seq = [None if s not in c else (c[s][0]["identifier"],) if len(c[s]) == 1 else
               tuple(sorted({r["identifier"] for r in c[s]})) for c in canon_runs]
        rank: dict[tuple[str, ...] | None, int] = {}
        ep = []
        returns = 0
        for pos, v in enumerate(seq):
            if v not in rank:
                rank[v] = len(rank)
                first_cal[(s, v)] = canon_runs[pos].get(s, [])
                if pos:
                    by_first.setdefault(pos, []).append((s, rank[v]))
            elif pos and v != seq[pos - 1]:
                returns += 1
            ep.append(rank[v])
        ident[s], epoch[s] = seq, ep
        if returns:
            notes.append(f"{chain}: input {_name(s)} went back {returns} time(s) to a "
                         "calibration it had used before; only the first use of each "
                         "calibration counts as a recalibration")
    events = []
    for pos in sorted(by_first):
        items = by_first[pos]
        cals = []
        olds, news = [], []
        for s, _k in items:
            old, new = ident[s][pos - 1], ident[s][pos]
            olds.append(old)
            news.append(new)
            prev_rows = first_cal.get((s, old), [])
            prev_name = prev_rows[0]["input"] if prev_rows else s[0]
            rows = canon_runs[pos].get(s) or [{
                "input": s[0], "kind": s[1], "module": s[2], "identifier": "(none)",
                "path": "", "calibration_date": ""}]
            for r in rows:
                c = {**r, "previous_identifier": ("(none)" if old is None else
                                                  "; ".join(old))}
                if prev_name != r["input"]:
                    c["previous_input"] = prev_name
                cals.append(c)
        events.append(Event(pos, tuple(s for s, _ in items), tuple(k for _, k in items),
                            tuple(olds), tuple(news), tuple(cals)))
    return ChainCals(slots, ident, epoch, tuple(events), tuple(notes))
