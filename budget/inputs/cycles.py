"""Input module ``cycles``: the Type A term of a pump-on/pump-off record.

The quantity is the mean on − off difference of the reading (in the reading's unit), a Type A
evaluation with its degrees of freedom. Statistics: :mod:`budget.stats.onoff` (segments, cycle
differences, white-noise model), :mod:`budget.stats.typea` (verdict, widening, planning),
:mod:`budget.stats.allan`, :mod:`budget.stats.autocorr`.

Data file
---------
CSV with a header row and exactly the columns ``time_s`` (s, strictly increasing), ``reading``
(any unit, see ``unit``) and ``pump`` (``on``/``off`` in any case, or ``1``/``0``). Blank lines
and lines starting with ``#`` are skipped.

Options (``[inputs.NAME]``)
---------------------------
file : str
    The record (relative to the spec's folder). Or ``files``.
files : list of str
    Several records, pooled: each is cut into cycles on its own (no cycle spans two files) and
    the differences of all files are analysed together.
unit : str
    Unit of ``reading``, e.g. ``"µV"`` or ``"nA"`` (:mod:`budget.units`). The result is
    converted to the coherent SI unit (V, A) before propagation; an offset scale (°C) is
    refused, the result being a difference. The diagnostics and figures stay in this unit.
    Default ``"V"``.
settle_s : float
    Readings closer than this to the first reading of their segment (the switch) are discarded,
    s. Default: derived from the record (:mod:`budget.inputs.settling`): the shortest time
    after which the fitted residual transient is below ``transient_fraction`` of the Type A
    standard uncertainty and the early/late test sees none, at least max(2 sampling
    intervals, 5 % of the median segment), at most half the median segment. The value used,
    the step response, τ and the test are in the diagnostics (``settling``).
settle_policy : str
    ``"warn"`` (default): a settle time (given or derived) that leaves a residual transient
    above ``transient_fraction`` of u (detected by the early/late test, or predicted by the
    fit) gives a warning with its size in u and the settle time or segment length that would
    remove it (severity "error" from 1 u on; :mod:`budget.inputs.cycles_settle`).
    ``"refuse"``: that is an error (exit 2).
transient_fraction : float
    Residual transient allowed by the default settle time, as a fraction of the Type A
    standard uncertainty (0 < fraction < 1). Default 0.1.
tail_s : float
    Readings closer than this to the last reading of their segment are discarded, s. Default 0.
start_s, stop_s : float
    Use only readings with start_s ≤ time_s ≤ stop_s (each file's own time axis). Default: all.
estimator : str
    ``"linear"`` (default): each on segment against its two neighbouring off segments,
    interpolated to its mean time (the mean of the two for a regular record), cancelling a
    linear offset drift. ``"cubic"``: against the four nearest off segments (cancels a drift up
    to a cubic; more noise, one cycle fewer at each end).
rejection : str
    ``"none"`` (default) or ``"mad"``: reject cycle differences farther than
    ``rejection_limit`` robust standard deviations (1.4826 · median absolute deviation) from
    the median, once. Rejected cycles are listed in the diagnostics and the provenance. With
    ``"none"`` such cycles are still flagged (:mod:`budget.inputs.glitches`): the warning
    ``cycles.glitch`` names them with the result without them.
rejection_limit : float
    Default 5.
whiteness_level : float
    Significance level of the white-noise test (0 < level < 1). Default 0.05.
target_relative_uncertainty : float
    When given, the diagnostics state the cycling time needed for u/|mean difference| to reach
    it (same segment length, settle and noise).
description : str
    Text for the report. Default: a description of the quantity.

Uncertainty
-----------
Neighbouring differences share an off segment, so they are correlated (ρ₁ = 1/6 for white
noise and a regular record); the white-noise standard error is the exact one for the
differences actually used (``budget.stats.onoff``), about 15 % larger than the naive s/√n.
Whether the record is white is tested on the Allan deviation of the differences; when it is
not, the uncertainty is widened (effective number of cycles from the autocorrelation, or the
Allan floor, the diagnostics say which) in proportion to the evidence, w = min(1,
log₁₀(level/p)) of the full widening (:mod:`budget.stats.typea`, step 5; diagnostics
``widening``), and the warning ``cycles.correlated_noise`` gives the factor. Limits (see :mod:`budget.stats.typea`): a weak
1/f part that matters only at the full record length is often passed as white, and for 1/f
noise the Allan floor is a convention — with noise extending far below 1/T it covers somewhat
less than the nominal probability (about 92 % instead of 95 % in the tests' flicker case).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np

from ..distributions import Distribution
from ..errors import ComputationError, DataError
from ..quantity import ModuleResult, Provenance, Quantity
from ..stats import onoff, typea
from ..stats.allan import edf_white_fm
from ..warnings import warn
from . import gaps, glitches, settling
from .context import InputContext
from .cycles_figures import figure_allan, figure_differences
from .cycles_settle import settling_findings
from .onoff_table import OnOffTable, mask_ranges, read_onoff

__all__ = ["KEYS", "evaluate"]

KEYS = frozenset({"file", "files", "unit", "settle_s", "tail_s", "start_s", "stop_s",
                  "estimator", "rejection", "rejection_limit", "whiteness_level",
                  "target_relative_uncertainty", "settle_policy", "transient_fraction"})


_METHOD_TEXT = {
    "white": "white-noise standard error of the mean of the cycle differences, exact for their "
             "correlation (neighbours share an off segment)",
    "autocorrelation": "standard error widened by the effective number of independent cycles "
                       "from the autocorrelation of the differences (Zhang 2006; Witt 2007)",
    "allan-floor": "Allan floor: white part plus the flat (flicker) floor of the Allan variance "
                   "of the differences, extrapolated to the whole record",
}


@dataclass(frozen=True)
class _Record:
    """One file, windowed (from reading index ``first_row``), segmented and cut into cycles."""

    table: OnOffTable
    first_row: int
    seg: onoff.Segments
    settle: float
    settle_default: bool
    diff: onoff.Differences
    gaps: tuple = ()             # budget.inputs.gaps.Gap, in the windowed readings
    gap_dropped: int = 0         # cycles dropped because they span a gap


def _options(ctx: InputContext) -> dict[str, Any]:
    o: dict[str, Any] = {
        "unit": ctx.option("unit", str, "V", check=lambda s: s.strip() != "", must="non-empty"),
        "settle_s": ctx.number("settle_s", None, nonnegative=True),
        "tail_s": ctx.number("tail_s", 0.0, nonnegative=True),
        "settle_policy": ctx.choice("settle_policy", ("warn", "refuse"), "warn"),
        "transient_fraction": ctx.option("transient_fraction", float, settling.DEFAULT_FRACTION,
                                         check=lambda x: 0 < x < 1, must="between 0 and 1"),
        "start_s": ctx.number("start_s", -math.inf),
        "stop_s": ctx.number("stop_s", math.inf),
        "estimator": ctx.choice("estimator", tuple(onoff.ESTIMATORS), "linear"),
        "rejection": ctx.choice("rejection", ("none", "mad"), "none"),
        "rejection_limit": ctx.number("rejection_limit", 5.0, positive=True),
        "whiteness_level": ctx.option("whiteness_level", float, 0.05,
                                      check=lambda x: 0 < x < 1, must="between 0 and 1"),
        "target": ctx.number("target_relative_uncertainty", None, positive=True),
        "description": ctx.option("description", str, ""),
    }
    if "start_s" in ctx.table and "stop_s" in ctx.table and not o["start_s"] < o["stop_s"]:
        raise ctx.spec_error("stop_s", f"must be larger than start_s ({o['start_s']:g}); got "
                                       f"{o['stop_s']:g}")
    return o


@dataclass(frozen=True)
class _Raw:
    """One file read and windowed: its readings from index ``first_row`` on."""

    table: OnOffTable
    first_row: int
    t: np.ndarray
    y: np.ndarray
    on: np.ndarray


def _read(ctx: InputContext, path: Path, o: dict[str, Any]) -> _Raw:
    shown = ctx.display(path)
    table = read_onoff(path, shown)
    lo = int(np.searchsorted(table.time, o["start_s"], side="left"))
    hi = int(np.searchsorted(table.time, o["stop_s"], side="right"))
    if hi - lo < 2:
        raise DataError("fewer than 2 readings between start_s and stop_s", file=shown,
                        field="time_s")
    return _Raw(table, lo, table.time[lo:hi], table.reading[lo:hi], table.on[lo:hi])


def _median_segment(raw: _Raw) -> float:
    """Median length of the complete segments (switch to switch), s; NaN when none."""
    starts = raw.t[np.concatenate(([0], np.flatnonzero(raw.on[1:] != raw.on[:-1]) + 1))]
    lengths = np.diff(starts)[1:]        # complete segments only (the first may be partial)
    return float(np.median(lengths)) if len(lengths) else math.nan


def _build(raw: _Raw, index: int, settle: float, settle_default: bool,
           o: dict[str, Any]) -> _Record:
    table, lo, shown = raw.table, raw.first_row, raw.table.shown
    seg = onoff.segment(raw.t, raw.y, raw.on, settle, o["tail_s"])
    if seg.count == 1:
        raise DataError(f"the pump column is constant ('{'on' if seg.on[0] else 'off'}' in all "
                        f"{len(raw.t)} readings used): no on/off cycle", file=shown, field="pump")
    usable = onoff.usable_on_segments(seg, o["estimator"])
    if len(usable) == 0:
        need = ("an off-on-off sequence" if o["estimator"] == "linear"
                else "an on segment with two off segments on each side")
        emptied = int(np.sum(seg.kept == 0))
        why = (f"; settle_s = {settle:g} s and tail_s = {o['tail_s']:g} s leave {emptied} of "
               "them without readings" if emptied else "")
        raise DataError(f"no complete cycle: the record has {seg.count} segment(s) and the "
                        f"'{o['estimator']}' estimator needs {need}{why}", file=shown,
                        field="pump")
    diff = onoff.differences(seg, o["estimator"], record=index)
    holes = gaps.find_gaps(raw.t, raw.on)
    across = gaps.spanning(holes, seg.start, seg.stop, diff.w_row, diff.w_col, diff.n)
    if across.any():
        if across.all():
            g = holes[0]
            raise DataError(f"no complete cycle: every cycle spans a time gap (the first "
                            f"{g.length_s:.6g} s after t = {g.t_before:.6g} s); no cycle spans "
                            "a gap", file=shown, row=lo + g.index + 2, field="time_s")
        diff = diff.subset(~across)
    empty = diff.involved[seg.kept[diff.involved] == 0]
    if len(empty):
        j = int(empty[0])
        n_read = int(seg.stop[j] - seg.start[j])
        med = _median_segment(raw)
        fast = (f" (the pump column alternates every {med:.3g} s, faster than the cuts)"
                if med <= settle + o["tail_s"] else "")
        raise DataError(f"segment of {n_read} reading(s) ({'on' if seg.on[j] else 'off'}) keeps "
                        f"no reading after settle_s = {settle:g} s and tail_s = {o['tail_s']:g} s"
                        f"{fast}; lower them or check the pump column", file=shown,
                        row=lo + int(seg.start[j]) + 1, field="pump")
    return _Record(table, lo, seg, settle, settle_default, diff, holes, int(across.sum()))


def _u_white(records: list[_Record], o: dict[str, Any]) -> float:
    """White-noise u of the pooled mean difference (NaN when it cannot be found)."""
    pooled = onoff.stack([r.diff for r in records])
    used = pooled.subset(_reject(pooled, o))
    if used.n < 2:
        return math.nan
    model = onoff.white_model(used)
    return float(np.std(used.d, ddof=1)) * math.sqrt(model.factor)


def _settled_records(raws: list[_Raw], o: dict[str, Any]) -> tuple[list[_Record], list[dict]]:
    """Records cut at the given or the data-derived settle time (budget.inputs.settling), and
    per file the step response, its fit and the choice."""
    assess = []
    for raw in raws:
        resp = settling.step_response(raw.t, raw.y, raw.on, o["tail_s"])
        fit = settling.fit_step(raw.t, raw.y, raw.on, resp, o["tail_s"]) if resp else None
        assess.append({"response": resp, "fit": fit, "choice": None})
    if o["settle_s"] is not None:
        return [_build(r, i, o["settle_s"], False, o) for i, r in enumerate(raws)], assess
    settles = []
    for raw in raws:
        seg_s = _median_segment(raw)
        dt = float(np.median(np.diff(raw.t)))
        settles.append(settling.floor_settle(seg_s, dt) if math.isfinite(seg_s) else 0.0)
    for _ in range(3):
        records = [_build(r, i, settles[i], True, o) for i, r in enumerate(raws)]
        u = _u_white(records, o)
        if not math.isfinite(u) or u <= 0:
            break
        new = list(settles)
        for i, (raw, a) in enumerate(zip(raws, assess)):
            if a["response"] is not None:
                a["choice"] = settling.choose_settle(raw.t, raw.y, raw.on, a["response"],
                                                     a["fit"], u, settles[i], o["tail_s"],
                                                     o["transient_fraction"])
                new[i] = a["choice"]["settle_s"]
        if new == settles:
            return records, assess
        settles = new
    return [_build(r, i, settles[i], True, o) for i, r in enumerate(raws)], assess


def _reject(diff: onoff.Differences, o: dict[str, Any]) -> np.ndarray:
    if o["rejection"] == "mad":
        return ~glitches.screen(diff.d, o["rejection_limit"]).flagged
    return np.ones(diff.n, dtype=bool)


def evaluate(ctx: InputContext) -> ModuleResult:
    """Evaluate the ``cycles`` input (see the module docstring for options and method)."""
    o = _options(ctx)
    _unit(ctx, o["unit"])   # an unknown unit is refused before any file is read
    paths = ctx.files()
    raws = [_read(ctx, p, o) for p in paths]
    records, assess = _settled_records(raws, o)
    pooled = onoff.stack([r.diff for r in records])
    keep = _reject(pooled, o)
    used = pooled.subset(keep)
    shown_all = ", ".join(r.table.shown for r in records)
    if used.n < 2:
        raise DataError(f"only {used.n} cycle difference(s) left; at least 2 are needed",
                        file=shown_all, field="pump")
    try:
        model = onoff.white_model(used)
        res = typea.analyse(used.d, model, o["whiteness_level"])
    except ComputationError as exc:
        raise DataError(exc.message, file=shown_all, field="reading") from None

    files, rec_diag, cycle_periods, used_s, kept_s = [], [], [], 0.0, 0.0
    col0 = 0
    for i, r in enumerate(records):
        seg = r.seg
        mine = used.w_col[(used.w_col >= col0) & (used.w_col < col0 + seg.count)] - col0
        col0 += seg.count
        inv = np.zeros(seg.count, dtype=bool)
        inv[mine] = True
        rows_mask = np.zeros(r.table.rows, dtype=bool)
        rows_mask[r.first_row:r.first_row + len(seg.keep)] = seg.keep & inv[seg.seg_of]
        files.append(ctx.file_ref(r.table.path, mask_ranges(rows_mask)))
        on_first = seg.t_first[seg.on]
        if len(on_first) > 1:
            cycle_periods.append(np.diff(on_first))
        idx = np.flatnonzero(inv)
        if len(idx):
            t_end = seg.t_first[idx[-1] + 1] if idx[-1] + 1 < seg.count else \
                r.table.time[r.first_row + seg.stop[idx[-1]] - 1]
            used_s += float(t_end - seg.t_first[idx[0]])
            kept_s += float(np.sum(seg.kept[idx]) * seg.dt)
        rec_diag.append({"file": files[-1].path, "readings": r.table.rows,
                         "segments": seg.count, "cycles": int(np.sum(used.record == i)),
                         "cycles_rejected": int(np.sum((pooled.record == i) & ~keep)),
                         "sampling_interval_s": seg.dt, "settle_s": r.settle,
                         "settle_default": r.settle_default,
                         "time_gaps": [g.to_dict(r.first_row) for g in r.gaps],
                         "cycles_across_gaps": r.gap_dropped})
    cycle_s = float(np.median(np.concatenate(cycle_periods))) if cycle_periods else math.nan
    unit = o["unit"]
    rejected = _rejected_list(records, [f.path for f in files], pooled, keep)
    diagnostics = _diagnostics(res, model, o, rec_diag, rejected, cycle_s, used_s, kept_s, unit)
    if o["target"] is not None:
        diagnostics["planning"] = typea.planning(res, model, o["target"], cycle_s, used_s)
    names = [f.path for f in files]
    settle_diag, settle_ws, settle_figs = settling_findings(ctx, raws, records, assess, names,
                                                            res.u_white, o)
    diagnostics["settling"] = settle_diag
    diagnostics["glitches"], glitch_ws = glitches.findings(records, names, pooled, res, o)
    if diagnostics["glitches"]["if_rejected"]:   # in SI too, for the effect on the result's U
        alt, scale = diagnostics["glitches"]["if_rejected"], _unit(ctx, o["unit"]).scale
        alt.update(value_si=alt["mean_difference"] * scale, u_si=alt["u"] * scale)
    settle_ws = _gap_warnings(records, names) + settle_ws + glitch_ws
    diagnostics["figures"] = [figure_differences(records, names, pooled, keep, res, unit),
                              figure_allan(res, cycle_s, unit), *settle_figs]
    return ModuleResult(quantities=(_quantity(ctx, res, o, records, files, rejected,
                                              settle_ws),),
                        diagnostics=diagnostics)


def _gap_warnings(records: list[_Record], names: list[str]) -> list:
    """``cycles.time_gap`` per record with gaps (budget.inputs.gaps)."""
    out = []
    for r, name in zip(records, names):
        if not r.gaps:
            continue
        parts = []
        for g in r.gaps[:5]:
            d = g.to_dict(r.first_row)
            missing = (f"; the pump is '{'on' if r.table.on[r.first_row + g.index] else 'off'}'"
                       " on both sides: a whole segment may be missing" if g.same_state else "")
            parts.append(f"{g.length_s:.6g} s between rows {d['rows'][0]} and {d['rows'][1]} "
                         f"({g.t_before:.6g} s → {g.t_after:.6g} s){missing}")
        more = f" and {len(r.gaps) - 5} more" if len(r.gaps) > 5 else ""
        out.append(warn("cycles.time_gap",
                        f"{name}: {len(r.gaps)} time gap(s) longer than {gaps.GAP_FACTOR:g} "
                        f"median sampling intervals ({r.seg.dt:.3g} s): " + "; ".join(parts)
                        + f"{more}; no cycle spans a gap: {r.gap_dropped} cycle(s) across "
                        "them dropped — check the record for lost readings or segments"))
    return out


def _rejected_list(records: list[_Record], names: list[str], pooled: onoff.Differences,
                   keep: np.ndarray) -> list[dict[str, Any]]:
    out = []
    for k in np.flatnonzero(~keep).tolist():
        r = records[int(pooled.record[k])]
        j = int(pooled.on_seg[k])
        out.append({"file": names[int(pooled.record[k])], "rows": f"{r.first_row + r.seg.start[j] + 1}-"
                    f"{r.first_row + r.seg.stop[j]}", "time_s": float(pooled.t[k]),
                    "difference": float(pooled.d[k])})
    return out


def _num(x: Any) -> Any:
    return None if x is None or not math.isfinite(float(x)) else float(x)


def _diagnostics(res: typea.TypeA, model: onoff.WhiteModel, o: dict[str, Any],
                 rec_diag: list, rejected: list, cycle_s: float, used_s: float, kept_s: float,
                 unit: str) -> dict[str, Any]:
    return {
        "records": rec_diag,
        "estimator": o["estimator"],
        "cycles_used": res.n,
        "cycles_rejected": len(rejected),
        "rejection": {"rule": o["rejection"], "limit": o["rejection_limit"]
                      if o["rejection"] != "none" else None, "rejected": rejected},
        "mean_difference": res.mean,
        "unit": unit,
        "standard_deviation": res.s,
        "u_naive": res.u_naive,
        "u_white": res.u_white,
        "white_over_naive": res.u_white / res.u_naive,
        "u": res.u,
        "dof": res.dof,
        "uncertainty_method": res.method,
        "uncertainty_method_text": _METHOD_TEXT[res.method],
        "noise_density": res.noise_density,
        "noise_density_unit": f"{unit}/√Hz",
        "lag1_autocorrelation": _num(res.r1),
        "lag1_autocorrelation_white_model": res.r1_model,
        "effective_number": res.acorr.to_dict() if res.acorr else None,
        "u_autocorrelation": _num(res.u_acorr),
        "white_noise": res.verdict.to_dict(),
        "widening": res.widening_to_dict(),
        "allan": {"kind": "overlapping", "m": [int(v) for v in res.curve.m],
                  "tau_s": [_num(v * cycle_s) for v in res.curve.m],
                  "adev": [float(v) for v in res.curve.deviation],
                  "adev_white_expected": [float(math.sqrt(v)) for v in res.avar_white],
                  "edf_white": [float(v) for v in edf_white_fm(res.n, res.curve.m)],
                  "fit": res.fit.to_dict() if res.fit else None},
        "cycle_period_s": _num(cycle_s),
        "time_used_s": used_s,
        "kept_fraction": kept_s / used_s if used_s > 0 else None,
    }


def _quantity(ctx: InputContext, res: typea.TypeA, o: dict[str, Any], records: list[_Record],
              files: list, rejected: list, settle_ws: list) -> Quantity:
    est = onoff.ESTIMATORS[o["estimator"]][1]
    method = (f"mean of {res.n} cycle differences ({est}); u by the {_METHOD_TEXT[res.method]}. "
              f"White-noise test: {res.verdict.text}.")
    if res.method == "white":
        dof_reason = (f"ν = {res.dof:.4g}: Satterthwaite's degrees of freedom of the sample "
                      f"variance of {res.n} correlated differences under white noise")
    elif res.method == "autocorrelation":
        dof_reason = f"ν = n_eff − 1 = {res.dof:.4g} (effective number of independent cycles)"
    else:
        dof_reason = (f"ν = {res.dof:.4g}: Welch–Satterthwaite from the white part and the "
                      "flicker-noise edf of the Allan variance at the longest averaging used")
    if res.widened and res.weight < 1.0:
        dof_reason += (f", weighted by the evidence (w = {res.weight:.3g}) against the white "
                       "part (Welch–Satterthwaite)")
    notes = [w.message for w in settle_ws]
    ws = list(settle_ws)
    if res.widened:
        ws.append(warn("cycles.correlated_noise", _widening_text(res, o["unit"])))
        notes.append(ws[-1].message)
    if o["rejection"] != "none":
        notes.append(f"rejection rule '{o['rejection']}' at {o['rejection_limit']:g} robust "
                     f"standard deviations: {len(rejected)} cycle(s) rejected"
                     + (": " + "; ".join(f"{x['file']} rows {x['rows']}" for x in rejected[:20])
                        if rejected else "") + (" ..." if len(rejected) > 20 else ""))
        if rejected:
            ws.append(warn("cycles.rejected", notes[-1], severity="note"))
    if not res.verdict.testable:
        notes.append(res.verdict.text)
        ws.append(warn("cycles.whiteness_untested", notes[-1]))
    if len(records) > 1:
        notes.append(f"{len(records)} records pooled; no cycle spans two files")
    prov = Provenance(
        origin="module:cycles", method=method,
        distribution_reason=("scaled and shifted Student t (JCGM 101 §6.4.9): a mean of many "
                             "cycle differences with a scale estimated from their scatter"),
        dof_reason=dof_reason, files=tuple(files), notes=tuple(notes), warnings=tuple(ws))
    unit = _unit(ctx, o["unit"])
    mean, u = res.mean * unit.scale, res.u * unit.scale
    if unit.scale != 1.0:
        notes.append(f"readings in {o['unit']}; the result converted to {unit.si} "
                     f"(× {unit.scale:.17g}) before propagation")
        prov = replace(prov, notes=tuple(notes))
    return Quantity(name=ctx.name, value=mean, standard_uncertainty=u,
                    distribution=Distribution.student_t(mean, u, res.dof),
                    unit=unit.si, dof=res.dof, evaluation="A",
                    description=o["description"] or "mean pump-on minus pump-off difference of "
                                                    "the reading, from the on/off record",
                    provenance=prov)


def _widening_text(res: typea.TypeA, unit: str) -> str:
    v = res.verdict
    return (f"the record is not white noise (Allan ratio R = {v.statistic:.3g} at m = {v.m} "
            f"cycles, p = {v.p_value:.3g} < {v.level:g}): u widened ×{res.u / res.u_white:.3g}, "
            f"from {res.u_white:.3g} to {res.u:.3g} {unit} (ν = {res.dof:.3g}), by weight "
            f"w = {res.weight:.3g} of the full {res.method} widening ×"
            f"{res.u_full / res.u_white:.3g} (w = min(1, log10(level/p)): full at p ≤ level/10); "
            "look for a drift or a wandering current (diagnostics: allan, widening)")


def _unit(ctx: InputContext, text: str):
    """The reading's unit, parsed once; offset scales refused (the result is a difference)."""
    from ..units import UnitError, parse_unit
    try:
        unit = parse_unit(text)
    except UnitError as exc:
        raise ctx.spec_error("unit", str(exc)) from None
    if unit.is_offset:
        raise ctx.spec_error("unit", f"{text!r} is an offset scale; an on − off difference "
                                     f"needs a unit of differences ({unit.si})")
    return unit
