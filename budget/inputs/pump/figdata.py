"""Figure data of a pump analysis: plain dicts drawn by :func:`budget.report.figures.module_figure`.

Data with fit, residuals, and the predicted |δ| against gate voltage. Nothing here draws.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from .cascade import CascadeModel
from .fit import sample_parameters

__all__ = ["figure_data", "MAX_POINTS"]

MAX_POINTS = 400
_BAND_SAMPLES = 1000


def _thin(*arrays: np.ndarray) -> list[list[float]]:
    n = len(arrays[0])
    idx = np.unique(np.linspace(0, n - 1, min(n, MAX_POINTS)).round().astype(int)) if n else []
    return [[_f(x) for x in np.asarray(arr)[idx]] for arr in arrays]


def _f(x: float) -> float | None:
    x = float(x)
    return x if math.isfinite(x) else None


def _pos(arr: np.ndarray) -> np.ndarray:
    """Values for a log axis: below 1e-20 (beyond anything a budget resolves) left out."""
    arr = np.asarray(arr, dtype=float)
    return np.where(arr > 1e-20, arr, np.nan)


def _fig(fid, title, xlabel, ylabel, series, xscale="linear", yscale="linear") -> dict:
    return {"id": fid, "title": title, "xlabel": xlabel, "ylabel": ylabel, "xscale": xscale,
            "yscale": yscale, "series": series}


def _points(label, x, y, yerr=None) -> dict:
    if yerr is None:
        xs, ys = _thin(x, y)
        return {"label": label, "style": "points", "x": xs, "y": ys}
    xs, ys, es = _thin(x, y, yerr)
    return {"label": label, "style": "points", "x": xs, "y": ys, "yerr": es}


def _line(label, x, y) -> dict:
    xs, ys = _thin(x, y)
    return {"label": label, "style": "line", "x": xs, "y": ys}


def _band(label, x, lo, hi) -> dict:
    xs, los, his = _thin(x, lo, hi)
    return {"label": label, "style": "band", "x": xs, "y": [None if a is None or b is None else
                                                               (a * b) ** 0.5 for a, b in
                                                               zip(los, his)],
            "y_low": los, "y_high": his}


def _draws(a: Any, n: int) -> np.ndarray:
    rec = a.record
    return sample_parameters(np.asarray(rec.values), np.asarray(rec.covariance), n,
                             a.prediction.seed)


def figure_data(analysis: Any) -> list[dict]:
    """Figures: data with fit, residuals, and predicted |δ| against gate voltage (log scale)."""
    a = analysis
    m = a.model_object
    theta = np.asarray(a.record.values)[None, :]
    n = a.plateau
    figs = []
    d = a.data
    is_cascade = isinstance(m, CascadeModel)
    if d is not None:
        if is_cascade:
            v = d.gate_voltage
            order = np.argsort(v)
            grid = np.linspace(v.min(), v.max(), MAX_POINTS)
            fit_y = m.predict(theta, v)
            figs.append(_fig("pump_fit", "Plateau scan and decay-cascade fit", "gate voltage (V)",
                             "⟨n⟩ (electrons per cycle)",
                             [_points("data", v[order], d.n_mean[order],
                                      None if d.n_std is None else d.n_std[order]),
                              _line("fit", grid, m.predict(theta, grid))]))
            figs.append(_fig("pump_residuals", "Residuals of the fit", "gate voltage (V)",
                             "data − fit (electrons per cycle)",
                             [_points("residual", v[order], (d.n_mean - fit_y)[order],
                                      None if d.n_std is None else d.n_std[order])]))
        else:
            t, v = d.hold_time, d.gate_voltage
            fit_y = m.predict(theta, v, t)
            series = []
            groups = [None] if v is None else list(np.unique(v))
            if len(groups) > 6:  # too many voltages to draw one curve each
                groups = [None]
                series.append(_points("data", t, d.n_mean))
            tgrid = np.geomspace(max(t[t > 0].min(), 1e-300), t.max(), 200)
            for g in groups:
                sel = np.ones(len(t), bool) if g is None else (v == g)
                lab = "" if g is None else f" at {g:g} V"
                if not (g is None and series):
                    o = np.argsort(t[sel])
                    series.append(_points("data" + lab, t[sel][o], d.n_mean[sel][o],
                                          None if d.n_std is None else d.n_std[sel][o]))
                if g is not None or v is None:
                    series.append(_line("fit" + lab, tgrid, m.predict(
                        theta, None if g is None else np.full(tgrid.size, g), tgrid)))
            figs.append(_fig("pump_fit", "Escape record and sequential-escape fit",
                             "hold time (s)", "⟨n_ej⟩ (electrons per cycle)", series,
                             xscale="log"))
            o = np.argsort(t)
            figs.append(_fig("pump_residuals", "Residuals of the fit", "hold time (s)",
                             "data − fit (electrons per cycle)",
                             [_points("residual", t[o], (d.n_mean - fit_y)[o],
                                      None if d.n_std is None else d.n_std[o])], xscale="log"))
    draws = _draws(a, _BAND_SAMPLES)
    pt = a.point
    if is_cascade:
        _, vk = m.split(theta)
        lo, hi = sorted((float(vk[0, n - 1]), float(vk[0, n])))
        # show the plateau: where the predicted error probability is below 1e-2
        fine = np.linspace(lo, hi, 2001)
        mi, ex = m.error_parts(theta, fine, n)
        flat = fine[(mi + ex) <= 1e-2]
        if flat.size >= 2:
            pad = 0.05 * (flat[-1] - flat[0])
            lo, hi = max(lo, flat[0] - pad), min(hi, flat[-1] + pad)
        grid = np.linspace(lo, hi, 300)
        missed, extra = m.error_parts(theta, grid, n)
        dev = (extra - missed) / n
        band = np.abs(np.array([m.deviation_at(draws, [g], n) for g in grid])) / n
        series = [_band("95 % of parameter samples", grid, *np.quantile(band, [0.025, 0.975],
                                                                         axis=1)),
                  _line("|δ| predicted", grid, _pos(np.abs(dev))),
                  _line("missed electrons", grid, _pos(missed / n)),
                  _line("extra electrons", grid, _pos(extra / n)),
                  _points("operating point", [pt["gate_voltage"]], _pos([abs(a.prediction.best)]))]
        figs.append(_fig("pump_error", "Predicted pump error on the plateau (model extrapolation)",
                         "gate voltage (V)", "|δ_pump|", series, yscale="log"))
    elif pt.get("gate_voltage") is not None and a.record.gate_range is not None:
        lo, hi = a.record.gate_range
        grid = np.linspace(lo, hi, 300)
        hold = np.full(grid.size, pt["hold_time"])
        probs = m.probabilities(theta, grid, hold)
        dev = (probs @ (np.arange(m.loaded + 1) - n)) / n
        band = np.abs(np.array([m.deviation(draws, {"gate_voltage": g, "hold_time":
                                                    pt["hold_time"]}, n) for g in grid])) / n
        series = [_band("95 % of parameter samples", grid, *np.quantile(band, [0.025, 0.975],
                                                                         axis=1)),
                  _line("|δ| predicted", grid, _pos(np.abs(dev))),
                  _line("P(n − 1 ejected)", grid, _pos(probs[:, n - 1])),
                  _points("operating point", [pt["gate_voltage"]], _pos([abs(a.prediction.best)]))]
        if n + 1 <= m.loaded:
            series.insert(3, _line("P(n + 1 ejected)", grid, _pos(probs[:, n + 1])))
        figs.append(_fig("pump_error", f"Predicted pump error at hold time {pt['hold_time']:g} s "
                                       "(model extrapolation)", "gate voltage (V)", "|δ_pump|",
                         series, yscale="log"))
    else:
        lo, hi = a.record.hold_time_range or (pt["hold_time"] / 10, pt["hold_time"] * 10)
        grid = np.geomspace(max(lo, pt["hold_time"] / 100, 1e-300), hi, 300)
        probs = m.probabilities(theta, None, grid)
        dev = (probs @ (np.arange(m.loaded + 1) - n)) / n
        figs.append(_fig("pump_error", "Predicted pump error against hold time (model "
                                       "extrapolation)", "hold time (s)", "|δ_pump|",
                         [_line("|δ| predicted", grid, _pos(np.abs(dev))),
                          _points("operating point", [pt["hold_time"]],
                                  _pos([abs(a.prediction.best)]))], xscale="log", yscale="log"))
    return figs
