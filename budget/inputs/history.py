"""Shared machinery of the calibration-history modules (``resistor``, ``amplifier``).

A calibration history is a CSV file with one row per calibration:

=====================  =========================================================================
column                 meaning
=====================  =========================================================================
date                   ISO 8601 date or date-time of the calibration (required)
value                  calibrated value in the quantity's unit (required)
expanded_uncertainty   U of the certificate, same unit (required, > 0)
coverage_factor        k of the certificate (required, > 0); u_i = U_i / k_i
temperature_C          temperature at which the value was obtained, °C (optional)
voltage_V              voltage applied during the calibration, V (optional, resistors)
certificate            certificate identifier, free text (optional)
=====================  =========================================================================

The values are fitted against time by weighted least squares (:mod:`budget.stats.regression`,
the mathematics of JCGM 100 H.3) with the time axis in days relative to the measurement date
``at``, so the first fitted parameter *is* the predicted value at ``at`` and its variance is the
first diagonal element of the parameter covariance.
"""

from __future__ import annotations

import datetime as _dt
import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..distributions import Distribution
from ..errors import BudgetError, DataError
from ..quantity import Provenance, Quantity
from ..stats.regression import INFLATE_POLICIES, Fit, fit
from .context import InputContext
from .tables import date_column, numeric_column, parse_iso, read_table, row_ranges

__all__ = [
    "HISTORY_KEYS",
    "DriftPrediction",
    "History",
    "decimal_year",
    "drift_figure",
    "drift_quantity",
    "history_diagnostics",
    "parse_when",
    "predict_drift",
    "read_history",
]

#: Option keys every history module accepts.
HISTORY_KEYS = frozenset({"file", "at", "drift", "inflate", "consistency_level", "exclude_rows",
                          "nominal"})

REQUIRED = ("date", "value", "expanded_uncertainty", "coverage_factor")
OPTIONAL = ("temperature_C", "voltage_V", "certificate")
_DAY = pd.Timedelta(days=1)


@dataclass(frozen=True)
class History:
    """The rows of a calibration history that take part in the fit."""

    path: object                 # pathlib.Path of the file
    shown: str                   # file name for messages
    rows: np.ndarray             # 1-based data rows used
    dates: pd.DatetimeIndex
    values: np.ndarray           # unit of the quantity
    u: np.ndarray                # standard uncertainties U/k, same unit
    temperature: np.ndarray | None   # °C, NaN where blank
    voltage: np.ndarray | None       # V, NaN where blank
    certificates: tuple[str, ...]
    excluded: tuple[int, ...]


@dataclass(frozen=True)
class DriftPrediction:
    """The drift fit and its prediction at the measurement date."""

    fit: Fit
    at: pd.Timestamp
    value: float
    u: float
    dof: float
    days_past_last: float        # > 0: extrapolated past the last calibration
    notes: tuple[str, ...]


def parse_when(ctx: InputContext, key: str = "at", default=None) -> pd.Timestamp | None:
    """An ISO 8601 date or date-time option (TOML string, date or date-time) as a naive UTC
    timestamp."""
    if key not in ctx.table:
        if default is None:
            raise ctx.spec_error(key, "is required (ISO 8601 date or date-time, e.g. "
                                      "\"2026-11-20T14:00\")")
        return default
    v = ctx.table[key]
    if isinstance(v, (_dt.datetime, _dt.date)):
        ts = pd.Timestamp(v)
    elif isinstance(v, str):
        ts = parse_iso(v)
        if ts is None:
            raise ctx.spec_error(key, f"not an ISO 8601 date or date-time "
                                      f"(YYYY-MM-DD[THH:MM[:SS]]): {v!r}")
    else:
        raise ctx.spec_error(key, f"must be an ISO 8601 date or date-time; got {v!r}")
    if ts.tzinfo is not None:
        ts = ts.tz_convert("UTC").tz_localize(None)
    return ts


def read_history(ctx: InputContext, *, voltage: bool = True) -> History:
    """Read and check the calibration history named by ``file``; apply ``exclude_rows``."""
    path = ctx.path_of(ctx.option("file", str), "file")
    shown = ctx.display(path)
    optional = OPTIONAL if voltage else tuple(c for c in OPTIONAL if c != "voltage_V")
    df = read_table(path, REQUIRED, optional, shown=shown)
    dates = date_column(df, "date", shown=shown)
    values = numeric_column(df, "value", shown=shown)
    big_u = numeric_column(df, "expanded_uncertainty", shown=shown, positive=True)
    k = numeric_column(df, "coverage_factor", shown=shown, positive=True)
    temp = (numeric_column(df, "temperature_C", shown=shown, allow_blank=True)
            if "temperature_C" in df else None)
    volt = (numeric_column(df, "voltage_V", shown=shown, allow_blank=True)
            if "voltage_V" in df else None)
    certs = tuple(df["certificate"].str.strip()) if "certificate" in df else ("",) * len(df)

    n = len(df)
    excluded = ctx.option("exclude_rows", list, [])
    if not all(isinstance(i, int) and not isinstance(i, bool) and 1 <= i <= n for i in excluded):
        raise ctx.spec_error("exclude_rows", f"must be a list of data row numbers 1..{n}; "
                                             f"got {excluded!r}")
    keep = np.ones(n, dtype=bool)
    keep[[i - 1 for i in excluded]] = False
    if not keep.any():
        raise ctx.spec_error("exclude_rows", "excludes every calibration")
    rows = np.arange(1, n + 1)[keep]
    return History(path=path, shown=shown, rows=rows, dates=dates[keep], values=values[keep],
                   u=(big_u / k)[keep], temperature=None if temp is None else temp[keep],
                   voltage=None if volt is None else volt[keep],
                   certificates=tuple(c for c, m in zip(certs, keep) if m),
                   excluded=tuple(sorted(set(excluded))))


def predict_drift(ctx: InputContext, hist: History, values: np.ndarray, at: pd.Timestamp, *,
                  default_drift: str = "linear", event: str = "calibration") -> DriftPrediction:
    """Fit ``values`` (the history values, possibly corrected to reference conditions) against
    time and predict at ``at``. Options read: ``drift`` (default ``default_drift``),
    ``inflate``, ``consistency_level``. ``hist.u`` None means an unweighted fit. ``event``
    names a row in messages ("calibration", "comparison")."""
    model = {"linear": "line", "constant": "constant"}[
        ctx.choice("drift", ("linear", "constant"), default_drift)]
    policy = ctx.choice("inflate", INFLATE_POLICIES, "chi2-test")
    level = ctx.option("consistency_level", float, 0.05, check=lambda a: 0 < a < 1,
                       must="between 0 and 1 (exclusive)")
    first = int(np.argmin(hist.dates.asi8))
    if at < hist.dates[first]:
        raise DataError(f"the measurement date at = {at.isoformat()} (spec {ctx.spec_file}, "
                        f"[inputs.{ctx.name}]) is before the first {event} "
                        f"({hist.dates[first].date().isoformat()}); a drift line is not "
                        "extrapolated backwards", file=hist.shown, row=int(hist.rows[first]),
                        field="date")
    days = np.asarray((hist.dates - at) / _DAY, dtype=float)
    if model == "line" and np.unique(days).size < 2:
        raise DataError(f"a linear drift needs {event}s on at least two different dates; "
                        f"give drift = \"constant\" or more {event}s", file=hist.shown,
                        field="date")
    try:
        f = fit(days, values, hist.u, model=model, x0=0.0, inflate=policy, alpha=level)
    except BudgetError as exc:
        raise exc.located(file=hist.shown) from None
    value, u = f.predict(0.0)
    last = hist.dates.max()
    past = float((at - last) / _DAY)
    notes = []
    if past > 0:
        notes.append(f"prediction at {at.isoformat()} extrapolates the drift line {past:.1f} "
                     f"days past the last {event} ({last.date().isoformat()})")
    if f.inflated:
        notes.append(f"scatter of the {event}s exceeds their stated uncertainties: {f.verdict}")
    elif f.weighted and f.nu > 0 and f.birge_ratio > 1:
        notes.append(f"Birge ratio {f.birge_ratio:.3g} > 1 but not inflated: {f.verdict}")
    if f.nu == 0:
        notes.append(f"{f.n} {event}(s) for {len(f.params)} parameter(s): the scatter "
                     "cannot be checked against the stated uncertainties")
    if hist.excluded:
        notes.append(f"rows excluded by the spec (exclude_rows): {row_ranges(hist.excluded)}")
    return DriftPrediction(fit=f, at=at, value=float(value), u=float(u), dof=f.dof,
                           days_past_last=past, notes=tuple(notes))


def drift_quantity(ctx: InputContext, hist: History, pred: DriftPrediction, *, name: str,
                   unit: str, what: str, extra_notes: tuple[str, ...] = ()) -> Quantity:
    """The calibration/drift row: the fitted value at ``at`` with the line's uncertainty."""
    f = pred.fit
    kind = "straight line" if f.model == "line" else "constant (weighted mean)"
    if math.isinf(pred.dof):
        dist = Distribution.normal(pred.value, pred.u)
        dist_reason = ("normal: the certificates state normal expanded uncertainties and the "
                       "prediction is a linear combination of them")
        dof_reason = ("infinite: the fit uses the certificates' stated uncertainties, which the "
                      "certificates give as reliable, and the scatter is consistent with them")
    else:
        dist = Distribution.student_t(pred.value, pred.u, pred.dof)
        dist_reason = ("scaled and shifted Student t: the scale of the uncertainties was "
                       "estimated from the residuals of the fit (JCGM 101 §6.4.9)")
        dof_reason = (f"{f.nu} = n - p: the covariance was scaled by the residual scatter "
                      f"(chi2/nu = {f.reduced_chi2:.3g}), an estimate with n - p degrees of "
                      "freedom")
    method = (f"weighted least-squares {kind} through {f.n} calibrations (u_i = U_i/k_i) "
              f"against time, evaluated at {pred.at.isoformat()} with the uncertainty of the "
              "fitted line from the full parameter covariance (JCGM 100 H.3)")
    ref = ctx.file_ref(hist.path, row_ranges(hist.rows))
    return Quantity(name=name, value=pred.value, standard_uncertainty=pred.u, distribution=dist,
                    unit=unit, dof=pred.dof, evaluation="B",
                    description=f"{what} predicted at the measurement date from its "
                                "calibration history",
                    provenance=Provenance(origin=f"module:{ctx.table.get('module')}",
                                          method=method, distribution_reason=dist_reason,
                                          dof_reason=dof_reason, files=(ref,),
                                          notes=pred.notes + tuple(extra_notes)))


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
        "predicted_value": pred.value, "predicted_standard_uncertainty": pred.u,
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
