"""Figure and diagnostics of a calibration-history fit (:mod:`budget.inputs.history`).

The numbers are in the coherent SI unit the history was converted to when read; the figure
shows relative deviations in parts in 10⁶ of a reference value.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from .context import InputContext
from .tables import row_ranges

if TYPE_CHECKING:  # pragma: no cover
    from .history import DriftPrediction, History

__all__ = ["decimal_year", "drift_figure", "history_diagnostics"]

_DAY = pd.Timedelta(days=1)


def decimal_year(ts: pd.Timestamp | pd.DatetimeIndex) -> float | list[float]:
    """Calendar year with the fraction elapsed, e.g. 2026.5 (for figure axes); a list for an
    index of dates."""
    idx = pd.DatetimeIndex([ts]) if isinstance(ts, pd.Timestamp) else pd.DatetimeIndex(ts)
    start = pd.to_datetime({"year": idx.year, "month": 1, "day": 1})
    end = pd.to_datetime({"year": idx.year + 1, "month": 1, "day": 1})
    frac = ((idx - pd.DatetimeIndex(start)) / (pd.DatetimeIndex(end) - pd.DatetimeIndex(start)))
    out = [float(v) for v in np.asarray(idx.year, dtype=float) + np.asarray(frac, dtype=float)]
    return out[0] if isinstance(ts, pd.Timestamp) else out


def drift_figure(ctx: InputContext, hist: History, values: np.ndarray, pred: DriftPrediction,
                 *, unit: str, what: str, reference: float) -> dict:
    """Figure data: calibrations with error bars, the drift line with its ±u band (k = 1) and
    the prediction, as relative deviations from ``reference`` in parts in 10^6."""
    scale = 1e6 / reference
    f = pred.fit
    t_first = hist.dates.min()
    t_end = max(pred.at, hist.dates.max())
    grid = pd.date_range(t_first, t_end, periods=200)
    y, u = f.predict(np.asarray((grid - pred.at) / _DAY, dtype=float))
    xs = decimal_year(grid)
    order = np.argsort(hist.dates.asi8)
    step = max(1, math.ceil(order.size / 400))  # at most ~400 points per series
    order = order[::step]
    return {
        "id": f"{ctx.name}-drift",
        "title": f"{what}: calibration history and drift {f.model}",
        "xlabel": "date (year)",
        "ylabel": f"({ctx.name} - {reference:.10g} {unit}) / {reference:.10g} {unit} (10^-6)",
        "xscale": "linear", "yscale": "linear",
        "series": [
            {"label": "calibrations (±u, k = 1)", "style": "points",
             "x": decimal_year(hist.dates[order]),
             "y": [float((values[i] - reference) * scale) for i in order],
             "yerr": [float(hist.u[i] * abs(scale)) for i in order]},
            {"label": "fitted line ± u (k = 1)", "style": "band", "x": xs,
             "y": [float((v - reference) * scale) for v in y],
             "y_low": [float((v - w - reference) * scale) for v, w in zip(y, u)],
             "y_high": [float((v + w - reference) * scale) for v, w in zip(y, u)]},
            {"label": "fitted line", "style": "line", "x": xs,
             "y": [float((v - reference) * scale) for v in y]},
            {"label": f"prediction at {pred.at.date().isoformat()} (±u, k = 1)",
             "style": "points", "x": [decimal_year(pred.at)],
             "y": [float((pred.value - reference) * scale)],
             "yerr": [float(pred.u * abs(scale))]},
        ],
    }


def history_diagnostics(hist: History, values: np.ndarray, pred: DriftPrediction, *,
                        unit: str) -> dict:
    """JSON-ready facts about the fit: parameters, drift per year, Birge ratio, dates."""
    f = pred.fit
    slope = f.params[1] if f.model == "line" else 0.0
    u_slope = f.std_errors[1] if f.model == "line" else 0.0
    last = hist.dates.max()

    def clean(v: float) -> float | None:
        return float(v) if math.isfinite(v) else None
    return {
        "fit": f.to_dict(),
        "x_axis": f"days relative to the measurement date {pred.at.isoformat()}",
        "at": pred.at.isoformat(),
        "predicted_value": pred.value, "predicted_standard_uncertainty": pred.u,
        "predicted_standard_uncertainty_independent": pred.u_independent,
        "predicted_standard_uncertainty_common": pred.u_common,
        "common_standard_uncertainty": pred.common_standard_uncertainty,
        "independent_cov": [list(r) for r in pred.independent_cov],
        "predicted_dof": clean(pred.dof), "unit": unit,
        "drift_per_year": slope * 365.25, "drift_per_year_uncertainty": u_slope * 365.25,
        "relative_drift_per_year": slope * 365.25 / pred.value if pred.value else None,
        "birge_ratio": clean(f.birge_ratio), "p_value": clean(f.p_value),
        "inflated": f.inflated, "verdict": f.verdict,
        "calibrations_used": int(f.n), "rows_used": row_ranges(hist.rows),
        "rows_excluded": list(hist.excluded),
        "first_calibration": hist.dates.min().isoformat(),
        "last_calibration": last.isoformat(),
        "days_since_last_calibration": pred.days_past_last,
        "extrapolated": pred.days_past_last > 0,
        "calibrations": [
            {"row": int(r), "date": d.isoformat(), "value": float(v),
             "value_at_reference_conditions": float(vc), "standard_uncertainty": float(w),
             "residual": float(res), "certificate": c}
            for r, d, v, vc, w, res, c in list(zip(hist.rows, hist.dates, hist.values, values,
                                                   hist.u, f.residuals,
                                                   hist.certificates))[:400]],
    }
