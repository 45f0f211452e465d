"""Text report of a pump analysis (``budget pump fit``).

:func:`fit_report` returns a report with fixed, numbered sections so that it reads the same for
every fit: data, parameters, correlations, fit statistics, predicted error at the operating
point, escape regime, cautions, fit-result file. The figure data are
:func:`budget.inputs.pump.figdata.figure_data`; nothing here draws or prints.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from ..inputs.pump.cascade import CascadeModel
from ..inputs.pump.fitfile import fit_file_text

__all__ = ["fit_report", "SECTIONS"]

SECTIONS = ("Data", "Parameters", "Correlations", "Fit statistics",
            "Predicted error at the operating point", "Escape regime (thermal-activation check)",
            "Cautions", "Fit result file")
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
    """The fixed-section text report of a :class:`~budget.inputs.pump.analysis.PumpAnalysis`."""
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
