"""Figure data of the ``cycles`` input (drawn by :func:`budget.report.figures.module_figure`):
the cycle differences against time, their Allan deviation and the mean step response after a
switch."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from ..stats import onoff, typea
from ..stats.allan import edf_white_fm
from . import settling

__all__ = ["figure_differences", "figure_allan", "figure_settling", "MAX_POINTS"]

MAX_POINTS = 400


def _binned(x: np.ndarray, y: np.ndarray, max_points: int) -> tuple[list, list, list | None]:
    """At most ``max_points`` points: means of consecutive groups, with their standard error."""
    if len(x) <= max_points:
        return x.tolist(), y.tolist(), None
    g = math.ceil(len(x) / max_points)
    k = len(x) // g * g
    xs, ys = x[:k].reshape(-1, g).mean(axis=1), y[:k].reshape(-1, g)
    return xs.tolist(), ys.mean(axis=1).tolist(), (ys.std(axis=1, ddof=1) / math.sqrt(g)).tolist()


def figure_differences(records: list, names: list[str], pooled: onoff.Differences,
                        keep: np.ndarray, res: typea.TypeA, unit: str) -> dict[str, Any]:
    series = []
    per = max(1, MAX_POINTS // len(records))
    for i in range(len(records)):
        sel = (pooled.record == i) & keep
        x, y, err = _binned(pooled.t[sel] / 3600.0, pooled.d[sel], per)
        label = names[i] if err is None else \
            f"{names[i]} (means of {math.ceil(int(sel.sum()) / per)} cycles)"
        s = {"label": label, "style": "points", "x": x, "y": y}
        if err is not None:
            s["yerr"] = err
        series.append(s)
    if (~keep).any():
        series.append({"label": "rejected", "style": "points",
                       "x": (pooled.t[~keep] / 3600.0)[:MAX_POINTS].tolist(),
                       "y": pooled.d[~keep][:MAX_POINTS].tolist()})
    span = [float(pooled.t.min() / 3600.0), float(pooled.t.max() / 3600.0)]
    series.append({"label": "mean ± u", "style": "band", "x": span, "y": [res.mean] * 2,
                   "y_low": [res.mean - res.u] * 2, "y_high": [res.mean + res.u] * 2})
    return {"id": "cycles-differences", "title": "On − off difference of each cycle",
            "xlabel": "time in record (h)", "ylabel": f"difference ({unit})",
            "xscale": "linear", "yscale": "linear", "series": series}


def figure_allan(res: typea.TypeA, cycle_s: float, unit: str) -> dict[str, Any]:
    tau = (res.curve.m * (cycle_s if math.isfinite(cycle_s) else 1.0)).astype(float)
    edf = edf_white_fm(res.n, res.curve.m)
    series = [{"label": "overlapping Allan deviation", "style": "points", "x": tau.tolist(),
               "y": res.curve.deviation.tolist(),
               "yerr": (res.curve.deviation / np.sqrt(2.0 * edf)).tolist()},
              {"label": "white noise (expected)", "style": "line", "x": tau.tolist(),
               "y": np.sqrt(res.avar_white).tolist()}]
    if res.fit is not None and res.method == "allan-floor":
        # avar_white = S²·A(m), so the fitted curve a·A(m) + b follows from it
        fit = res.fit.a * res.avar_white / res.noise_density ** 2 + res.fit.b
        series.append({"label": "white + floor fit", "style": "line", "x": tau.tolist(),
                       "y": np.sqrt(fit).tolist()})
    return {"id": "cycles-allan", "title": "Allan deviation of the cycle differences",
            "xlabel": "averaging time τ (s)" if math.isfinite(cycle_s) else "cycles averaged",
            "ylabel": f"Allan deviation ({unit})", "xscale": "log", "yscale": "log",
            "series": series}


def figure_settling(resp: settling.StepResponse, fit: settling.ExpFit, settle_s: float,
                    unit: str, label: str = "", index: int = 0) -> dict[str, Any]:
    """Figure data (report/figures.py ``module_figure``): the antisymmetric step response (the
    transient, drift removed) on a log scale, the fitted exponential, the noise of the mean
    response and the settle time."""
    sel = settling.thin(len(resp.lag_s))
    x = resp.lag_s[sel]
    a = np.abs(resp.anti[sel])
    ok = a > 0
    series = [{"label": "|transient|: half of (off→on − on→off) mean excess", "style": "points",
               "x": x[ok].tolist(), "y": a[ok].tolist()}]
    noise = resp.anti_se[sel]
    series.append({"label": "standard error of the mean response", "style": "line",
                   "x": x.tolist(), "y": noise.tolist()})
    lows = [v for s in series for v in s["y"] if v > 0]
    y_lo, y_hi = (min(lows), max(lows)) if lows else (1e-30, 1.0)
    if fit.usable:
        yf = np.abs(fit.amplitude) * np.exp(-x / fit.tau_s)
        keep = yf >= y_lo / 10
        series.append({"label": f"fit |A|·exp(−t/τ), τ = {fit.tau_s:.3g} s", "style": "line",
                       "x": x[keep].tolist(), "y": yf[keep].tolist()})
    series.append({"label": f"settle time {settle_s:.4g} s", "style": "line",
                   "x": [settle_s, settle_s], "y": [y_lo, y_hi]})
    title = "Mean step response after a switch" + (f" ({label})" if label else "")
    return {"id": "cycles-settling" + (f"-{index + 1}" if index else ""), "title": title,
            "xlabel": "time since the switch (s)",
            "ylabel": f"|excess over the segment's late level| ({unit})",
            "xscale": "linear", "yscale": "log", "series": series}
