"""Text report and figure data for a pump analysis (``budget pump fit`` and the spec module).

:func:`fit_report` returns a report with fixed, numbered sections so that it reads the same for
every fit: data, parameters, correlations, fit statistics, predicted error at the operating
point, escape regime, cautions, fit-result file. :func:`figure_data` returns figure
descriptions (plain dicts, see :mod:`budget.report.figures`); nothing here draws or prints.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from .pump_cascade import CascadeModel
from .pump_fit import sample_parameters
from .pump_fitfile import fit_file_text

__all__ = ["fit_report", "figure_data", "SECTIONS", "MAX_POINTS"]

SECTIONS = ("Data", "Parameters", "Correlations", "Fit statistics",
            "Predicted error at the operating point", "Escape regime (thermal-activation check)",
            "Cautions", "Fit result file")
MAX_POINTS = 400
_BAND_SAMPLES = 1000
_LABELS = {"p_missed": "P(missed)", "p_extra": "P(extra)", "p_exactly_n": "P(n ejected)",
           "p_n_minus_1": "P(n − 1)", "p_n_plus_1": "P(n + 1)", "p_fewer": "P(< n)",
           "p_more": "P(> n)", "figure_of_merit": "δ_(n+1) = a·ΔV",
           "escape_time_ratios": "τ_(k+1)/τ_k", "escape_spacing_ok": "spacing ≥ 3×"}


def _g(x: float | None, digits: int = 6) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "—"
    return f"{x:.{digits}g}"


def _heading(i: int) -> list[str]:
    title = f"[{i}] {SECTIONS[i - 1]}"
    return ["", title, "-" * len(title)]


def fit_report(analysis: Any) -> str:
    """The fixed-section text report of a :class:`~budget.inputs.pump_analysis.PumpAnalysis`."""
    a, p, rec = analysis, analysis.prediction, analysis.record
    m = a.model_object
    cov = np.asarray(rec.covariance)
    se = np.sqrt(np.clip(np.diag(cov), 0, None))
    units = m.param_units
    out = [f"Pump characterisation: {a.model} model, plateau n = {a.plateau}",
           "The pump error below is a model extrapolation, not a measurement."]
    # 1 data
    out += _heading(1)
    if a.data is not None:
        d = a.data
        out.append(f"file            {d.file}")
        out.append(f"rows            {d.rows} ({len(d.n_mean)} points)")
        if d.gate_voltage is not None:
            out.append(f"gate voltage    {_g(d.gate_voltage.min())} .. {_g(d.gate_voltage.max())} V")
        if d.hold_time is not None:
            out.append(f"hold time       {_g(d.hold_time.min())} .. {_g(d.hold_time.max())} s")
        out.append("weights         " + ("n_std column" if d.n_std is not None else
                                         "none (no n_std column)"))
    else:
        out.append(f"fit-result file {a.source_file}" + (f" ({rec.source})" if rec.source else ""))
        out.append("no data were fitted here")
    # 2 parameters
    out += _heading(2)
    w = max(len(n) for n in rec.names)
    out.append(f"{'name':<{w}}  {'value':>14}  {'std error':>10}  unit")
    for n, v, s, u in zip(rec.names, rec.values, se, units):
        out.append(f"{n:<{w}}  {v:>14.8g}  {s:>10.3g}  {u}")
    # 3 correlations
    out += _heading(3)
    with np.errstate(all="ignore"):
        r = np.where(np.outer(se, se) > 0, cov / np.outer(se, se), 0.0)
    cw = max(8, max(len(n) for n in rec.names) + 2)
    out.append(" " * (w + 2) + "".join(f"{n:>{cw}}" for n in rec.names))
    for n, row in zip(rec.names, r):
        out.append(f"{n:<{w}}  " + "".join(f"{x:>{cw}.3f}" for x in row))
    # 4 fit statistics
    out += _heading(4)
    if a.fit is not None:
        f = a.fit
        out.append(f"chi-squared     {_g(f.chi2, 5)} with ν = {f.dof} (reduced {_g(f.reduced_chi2, 4)})")
        out.append(f"covariance      {f.scale_reason}")
        out.append(f"residual rms    {_g(f.residual_rms, 3)} electrons per cycle")
        out.append(f"evaluations     {f.nfev}")
    else:
        out.append("not available: the fit was made elsewhere"
                   + (f" (ν = {rec.dof:g})" if math.isfinite(rec.dof) else ""))
    # 5 prediction
    out += _heading(5)
    pt = a.point
    if pt.get("gate_voltage") is not None:
        out.append(f"gate voltage    {_g(pt['gate_voltage'])} V")
    if pt.get("hold_time") is not None:
        out.append(f"hold time       {_g(pt['hold_time'])} s")
    out.append(f"δ at the fit    {p.best:.4g}")
    out.append(f"δ (sampled)     {p.mean:.4g}, u = {p.std:.2g}  ({p.samples} parameter samples, "
               f"seed {p.seed})")
    out.append(f"u (linear)      {p.linear_std:.2g}" + ("   <- differs from the sampled u; the "
                                                         "sampled value is used" if p.differs else ""))
    out.append(f"95 % of samples {p.low_95:.3g} .. {p.high_95:.3g} (skewness {p.skewness:.2g})")
    for k, v in a.outcome.items():
        if k == "escape_times_s":
            out.append("escape times    " + ", ".join(f"τ_{i + 1} = {t:.3g} s"
                                                       for i, t in enumerate(v)))
        else:
            out.append(f"{_LABELS.get(k, k):<15} {v:.4g}")
    for k, v in a.findings.items():
        if isinstance(v, list):
            v = ", ".join(f"{x:.3g}" for x in v) or "—"
        elif isinstance(v, bool):
            v = "yes" if v else "no"
        elif isinstance(v, float) or v is None:
            v = _g(v, 4)
        out.append(f"{_LABELS.get(k, k):<15} {v}")
    if a.best is not None:
        b = a.best
        if isinstance(m, CascadeModel):
            out.append(f"best point      {b['gate_voltage']:.6g} V: total error probability "
                       f"{b['error_probability']:.3g}, δ = {b['predicted_error']:.3g}")
            if b.get("zero_crossing") is not None:
                out.append(f"δ = 0 at        {b['zero_crossing']:.6g} V (missed and extra "
                           "electrons cancel; not a robust operating point)")
        else:
            out.append(f"best point      {b['gate_voltage']:.6g} V: P(exactly n) = "
                       f"{b['p_exactly_n']:.6g} at hold time {b['hold_time']:.3g} s"
                       + (" (at the edge of the data)" if b.get("at_edge") else ""))
    # 6 regime
    out += _heading(6)
    if a.thermal is None:
        out.append("not checked: no temperature series given")
    else:
        th = a.thermal
        out.append(f"file            {th.file}")
        for T, s, u in zip(th.temperatures, th.slopes, th.slope_uncertainties):
            out.append(f"T = {T:<8.4g} K  d lnΓ/dV = {s:.4g} ± {u:.2g} 1/V")
        out.append(f"verdict         {th.verdict}")
        out.append(f"statistic       {th.reason}")
        if th.verdict == "thermal activation":
            out.append(f"lever arm       α = {th.lever_arm:.4g} ± {th.lever_arm_uncertainty:.2g}")
    # 7 cautions
    out += _heading(7)
    out += [f"- {n}" for n in a.notes]
    # 8 fit file
    out += _heading(8)
    out += fit_file_text(rec).rstrip("\n").splitlines()
    return "\n".join(out) + "\n"


# ---------------------------------------------------------------------------- figures
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
