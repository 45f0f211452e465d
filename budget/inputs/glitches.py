"""Glitches in an on/off record: cycle differences that are outliers by a robust rule.

Rule
----
A cycle difference d_i is flagged when |d_i − median(d)| > L·σ_MAD, with
σ_MAD = 1.4826·median(|d − median(d)|) and L = ``rejection_limit`` (default 5). The factor
1.4826 = 1/Φ⁻¹(3/4) makes σ_MAD a consistent estimate of σ for normal data (derivation); the
median absolute deviation as the robust scale of outlier screening is common practice
(NIST/SEMATECH e-Handbook of Statistical Methods, §1.3.5.17, the modified z-score of Iglewicz
and Hoaglin — memory). At L = 5 a normal difference is flagged with probability 5.7·10⁻⁷, so
a clean record of 10⁴ cycles is flagged about once in 170 runs (2·Φ(−5) per cycle —
derivation). One glitch in an off segment spoils the two cycles that share it; both are flagged.

Where the outlier is
--------------------
A flagged cycle difference combines an on segment with its off neighbours; the glitch may sit
in any of them. Each segment mean m_j is compared with the same-state segments on either side
(j ± 2, interpolated linearly to its mean time; one side at the record's ends): the residual
r_j, scaled by the σ_MAD of the residuals of that pump state, says how far the segment stands
out from its own kind. Of the segments a flagged cycle uses, the one with the largest scaled
residual is named as the outlier's segment (:func:`segment_scores`). A glitch in off segment j
shifts r_j by its full size and r_(j±2) by half of it with the opposite sign, so the segment
itself wins (derivation); a glitch in on segment j spoils only cycle j. The warning also names
the kept reading of that segment farthest from the neighbours' level (its row and time).

Flagging never rejects: with ``rejection = "none"`` (the default) the flagged cycles stay in the
result and the module's warning ``cycles.glitch`` names each (file, rows, time, distance in
σ_MAD) with the result it would give without them; ``rejection = "mad"`` rejects them.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import ComputationError
from ..stats import onoff, typea
from ..warnings import warn

__all__ = ["MAD_FACTOR", "Screen", "screen", "segment_scores", "findings"]

#: 1/Φ⁻¹(3/4): σ of a normal distribution over its median absolute deviation.
MAD_FACTOR = 1.4826


@dataclass(frozen=True)
class Screen:
    """The robust screen of the cycle differences (reading unit)."""

    median: float
    sigma_mad: float
    limit: float
    distance: np.ndarray      # |d − median| / σ_MAD per cycle (0 where σ_MAD = 0)
    flagged: np.ndarray       # bool per cycle

    def to_dict(self) -> dict:
        return {"rule": f"|d − median| > {self.limit:g}·σ_MAD, σ_MAD = {MAD_FACTOR}·MAD",
                "median": self.median, "sigma_mad": self.sigma_mad, "limit": self.limit,
                "flagged": int(self.flagged.sum())}


def screen(d: np.ndarray, limit: float = 5.0) -> Screen:
    """Flag the cycle differences ``d`` farther than ``limit`` σ_MAD from their median."""
    d = np.asarray(d, dtype=float)
    med = float(np.median(d))
    sig = MAD_FACTOR * float(np.median(np.abs(d - med)))
    if sig > 0:
        dist = np.abs(d - med) / sig
    else:
        dist = np.zeros(len(d))
    return Screen(median=med, sigma_mad=sig, limit=limit, distance=dist, flagged=dist > limit)


def neighbour_level(mean: np.ndarray, t_mean: np.ndarray, j: int) -> float:
    """The level of segment ``j`` from the same-state segments j ± 2 (linear in time; the one
    that exists at a record's end), reading unit; NaN when neither keeps a reading."""
    n = len(mean)
    lo, hi = j - 2, j + 2
    a = lo >= 0 and bool(np.isfinite(mean[lo]))
    b = hi < n and bool(np.isfinite(mean[hi]))
    if a and b:
        w = (t_mean[hi] - t_mean[j]) / (t_mean[hi] - t_mean[lo])
        return float(w * mean[lo] + (1 - w) * mean[hi])
    if a or b:
        return float(mean[lo if a else hi])
    return math.nan


def segment_scores(mean: np.ndarray, t_mean: np.ndarray, on: np.ndarray) -> np.ndarray:
    """How far each segment mean stands out from the same-state segments beside it.

    Parameters
    ----------
    mean, t_mean : ndarray
        Segment means (reading unit; NaN where a segment keeps no reading) and their mean
        times, s, of one record (segments alternate in state).
    on : ndarray of bool
        Pump state of each segment.

    Returns
    -------
    ndarray
        |r_j − median(r)| / σ_MAD(r) per segment, the median and σ_MAD taken over the
        segments of the same state (module docstring); 0 where it cannot be formed.
    """
    mean, t_mean, on = np.asarray(mean, float), np.asarray(t_mean, float), np.asarray(on, bool)
    n = len(mean)
    r = np.array([mean[j] - neighbour_level(mean, t_mean, j) for j in range(n)])
    out = np.zeros(n)
    for state in (True, False):
        sel = (on == state) & np.isfinite(r)
        if sel.sum() < 3:
            continue
        med = float(np.median(r[sel]))
        sig = MAD_FACTOR * float(np.median(np.abs(r[sel] - med)))
        if sig > 0:
            out[sel] = np.abs(r[sel] - med) / sig
    return out


def findings(records: Sequence[Any], names: list[str], pooled: onoff.Differences,
             res: typea.TypeA, o: dict[str, Any]) -> tuple[dict[str, Any], list]:
    """The robust screen of all cycles, where each outlier is, and the result without the
    flagged ones when they were kept.

    ``records`` are the cycles module's records (``seg``, ``first_row``, ``table``); ``o``
    its options (``rejection``, ``rejection_limit``, ``whiteness_level``, ``unit``).
    Returns the diagnostics ``glitches`` and the warnings (``cycles.glitch``).
    """
    scr = screen(pooled.d, o["rejection_limit"])
    listed = []
    offsets = np.cumsum([0] + [r.seg.count for r in records])
    scores = [segment_scores(r.seg.mean, r.seg.t_mean, r.seg.on) for r in records]
    for k in np.flatnonzero(scr.flagged).tolist():
        i = int(pooled.record[k])
        r = records[i]
        j = int(pooled.on_seg[k])
        used = pooled.w_col[pooled.w_row == k] - offsets[i]
        listed.append({"cycle": k + 1, "file": names[i],
                       "rows": f"{r.first_row + r.seg.start[j] + 1}-{r.first_row + r.seg.stop[j]}",
                       "time_s": float(pooled.t[k]), "difference": float(pooled.d[k]),
                       "sigma_distance": float(scr.distance[k]),
                       "outlier_segment": _outlier_segment(r, int(used[np.argmax(
                           scores[i][used])]) if len(used) else j)})
    diag: dict[str, Any] = {**scr.to_dict(), "cycles": listed[:100], "if_rejected": None}
    ws = []
    spread = float(np.max(np.abs(pooled.d - scr.median))) if pooled.n else 0.0
    if scr.sigma_mad == 0 and spread > 0:
        # more than half the differences equal: every distance is 0, nothing can be flagged
        odd = int(np.count_nonzero(pooled.d != scr.median))
        ws.append(warn("cycles.glitch_screen_blind",
                       f"more than half of the {pooled.n} cycle differences are exactly equal "
                       f"(σ_MAD = 0: readings quantized coarser than their noise, or a "
                       f"synthetic record), so the robust screen cannot judge outliers: {odd} "
                       f"difference(s) depart from the median by up to {spread:.3g} "
                       f"{o['unit']} and none is flagged"
                       + (" or rejected" if o["rejection"] != "none" else "")
                       + "; look at the cycle differences before relying on the result"))
    if listed and o["rejection"] == "none":
        unit = o["unit"]
        head = (f"{len(listed)} cycle difference(s) beyond {o['rejection_limit']:g} robust "
                f"standard deviations (σ_MAD = {scr.sigma_mad:.3g} {unit}): "
                f"{_glitch_places(listed)}; kept in the result ({res.mean:.8g} ± "
                f"{res.u:.3g} {unit}); ")
        r2, why = _without_flagged(pooled, scr, o)
        if r2 is not None:
            diag["if_rejected"] = {"mean_difference": r2.mean, "u": r2.u, "dof": r2.dof,
                                   "cycles_used": r2.n}
            tail = (f"without them it would be {r2.mean:.8g} ± {r2.u:.3g} {unit}; consider "
                    "rejection = \"mad\" if they are glitches")
        else:
            # never silently omit the effect: say that it is unknown, and why
            diag["if_rejected_unavailable"] = why
            tail = (f"the result without them cannot be stated ({why}), so their effect on "
                    "the result and its U is unknown; look at the flagged cycles before "
                    "relying on it")
        ws.append(warn("cycles.glitch", head + tail))
    return diag, ws


def _without_flagged(pooled: onoff.Differences, scr: Screen, o: dict[str, Any]
                     ) -> tuple[typea.TypeA | None, str]:
    """The Type A result of the unflagged cycles, or None and the reason it cannot be had."""
    left = pooled.n - int(scr.flagged.sum())
    if left < 2:
        return None, (f"only {left} cycle difference(s) would remain; a Type A evaluation "
                      "needs at least 2")
    try:
        alt = pooled.subset(~scr.flagged)
        return typea.analyse(alt.d, onoff.white_model(alt), o["whiteness_level"]), ""
    except ComputationError as e:
        return None, f"the evaluation of the {left} remaining cycles failed: {e}"


def _outlier_segment(r: Any, j: int) -> dict[str, Any]:
    """Segment ``j`` of ``r`` as the place of a glitch: state, rows, times and the kept
    reading farthest from the level of the same-state segments beside it."""
    seg, lo, table = r.seg, r.first_row, r.table
    a, b = int(seg.start[j]), int(seg.stop[j])
    y = table.reading[lo + a:lo + b]
    kept = seg.keep[a:b]
    out = {"state": "on" if seg.on[j] else "off", "rows": f"{lo + a + 1}-{lo + b}",
           "time_s": [float(table.time[lo + a]), float(table.time[lo + b - 1])]}
    level = neighbour_level(seg.mean, seg.t_mean, j)
    if kept.any():
        level = level if math.isfinite(level) else float(np.median(y[kept]))
        dev = np.where(kept, np.abs(y - level), -1.0)
        p = int(np.argmax(dev))
        out.update(peak_row=lo + a + p + 1, peak_time_s=float(table.time[lo + a + p]))
    return out


def _glitch_places(listed: list[dict[str, Any]]) -> str:
    """The warning's list of flagged cycles grouped by the segment holding the outlier."""
    groups: dict[tuple[str, str], list[dict[str, Any]]] = {}
    for x in listed:
        groups.setdefault((x["file"], x["outlier_segment"]["rows"]), []).append(x)
    parts = []
    for (file, rows), xs in list(groups.items())[:5]:
        seg = xs[0]["outlier_segment"]
        t0, t1 = seg["time_s"]
        peak = (f"; farthest reading row {seg['peak_row']} at {seg['peak_time_s']:.6g} s"
                if "peak_row" in seg else "")
        cyc = ", ".join(f"cycle {x['cycle']} ({x['file']} rows {x['rows']}, "
                        f"{x['sigma_distance']:.3g} σ from the median)" for x in xs)
        parts.append(f"outlier in the {seg['state']} segment {file} rows {rows} "
                     f"({t0:.6g}-{t1:.6g} s{peak}), spoiling {cyc}")
    return "; ".join(parts) + (" ..." if len(groups) > 5 else "")
