"""Shared machinery of the calibration-history modules (``resistor``, ``amplifier``, and the
comparison file of ``frequency``).

A calibration history is a CSV file with one row per calibration:

=====================  =========================================================================
column                 meaning
=====================  =========================================================================
date                   ISO 8601 date or date-time of the calibration (required)
value                  calibrated value (required); coherent SI (Ω) unless the header
                       gives a unit, ``value [GΩ]``
expanded_uncertainty   U of the certificate, in the value's unit unless its header gives
                       its own (required, > 0)
coverage_factor        k of the certificate (required, >= 1); u_i = U_i / k_i, and ν_i from k_i
coverage_probability   the p the certificate states k for (optional; blank: the spec's
                       ``coverage_probability``, default 0.95); k = 1 rows need 0.6827
reference              the calibrating laboratory's reference behind this calibration, free text
                       (optional; see ``common_standard_uncertainty``)
temperature_C          temperature at which the value was obtained, °C (optional)
voltage_V              voltage applied during the calibration, V unless the header gives a
                       unit, ``voltage_V [mV]`` (optional, resistors)
certificate            certificate identifier, free text (optional)
=====================  =========================================================================

Units (:mod:`budget.inputs.column_units`): the module states the dimension of ``value`` (a
resistance for ``resistor``; for ``amplifier`` a transresistance or a gain); a header unit of
another dimension, an unreadable one, an offset scale on ``expanded_uncertainty`` or a unit on
any other column is refused naming the file and the column. The numbers are converted to
coherent SI when read. The spec keys ``common_standard_uncertainty`` and ``nominal`` are in the
unit of the values as the file states them (the header's, else the module's ``unit`` key, else
coherent SI).

The values are fitted against time by weighted least squares (:mod:`budget.stats.regression`,
the mathematics of JCGM 100 H.3) with the time axis in days relative to the measurement date
``at``, so the first fitted parameter *is* the predicted value at ``at`` and its variance is the
first diagonal element of the parameter covariance.

Common part of the calibrations (``common_standard_uncertainty``)
-----------------------------------------------------------------
Calibrations made against the same reference standard share that standard's error: it does not
average away (JCGM 100 §5.2, F.1.2.3). With the key ``common_standard_uncertainty`` = u_c (in the
value's unit; the part of each listed standard uncertainty common to the calibrations) the
covariance of the history values is V = diag(u_i² − u_c²) + u_c²·S, S_ij = 1 when rows i and j
share a reference (every row when the file has no ``reference`` column; with the column, rows
with the same non-blank text; a blank row shares with none). The fit is generalised least
squares with V; the prediction ŷ = Σ a_i y_i then has the variance
aᵀ diag(u_i² − u_c²) a + u_c²·aᵀSa. The second part is reported as its own budget row
``NAME_common`` (relative, normal, about 0), so that it is visible and ``compare`` treats it as
shared between runs; the first stays with ``NAME_cal``. When the calibrations scatter more than
stated, only the independent part is inflated (the common part cannot show in the scatter).
Every u_i must exceed u_c.

Degrees of freedom from the coverage factors (``coverage_probability``)
----------------------------------------------------------------------
A certificate's k stated for a coverage probability p implies the degrees of freedom of its u:
ν_i solves t_p(ν_i) = k_i (:func:`budget.coverage.dof_from_coverage_factor`; JCGM 100 G.4–G.6,
Table G.2). ``coverage_probability`` (default 0.95, for every row) is the p the certificates
state k for; k = 2.00 at 0.9545 gives ν_i = ∞, k = 2.00 at 0.95 gives ν_i = 60. When the fit
keeps the stated uncertainties (not inflated), the prediction ŷ = Σ a_i y_i has the ν of
Welch–Satterthwaite (JCGM 100 G.2b) over its independent parts w_i = a_i²(u_i² − u_c²):
ν = (Σ w_i)² / Σ w_i²/ν_i. When the scatter inflated the covariance, ν = n − p of the fit.
"""

from __future__ import annotations

import datetime as _dt
import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..coverage import DEFAULT_CERTIFICATE_PROBABILITY
from ..distributions import Distribution
from ..errors import BudgetError, DataError
from ..quantity import Provenance, Quantity
from ..stats.regression import INFLATE_POLICIES, Fit, fit
from ..units import Unit
from ..warnings import Warning, warn
from .column_units import ColumnUnit, column_unit, to_si
from .context import InputContext
from .history_checks import INTERVAL_KEYS, extrapolation
from .history_dof import dof_from_certificates, row_dofs
from .tables import date_column, numeric_column, parse_iso, read_table, row_ranges

__all__ = [
    "HISTORY_KEYS",
    "DriftPrediction",
    "History",
    "common_quantity",
    "drift_quantity",
    "parse_when",
    "predict_drift",
    "read_history",
]

#: Option keys every history module accepts.
HISTORY_KEYS = frozenset({"file", "at", "drift", "inflate", "consistency_level", "exclude_rows",
                          "nominal", "common_standard_uncertainty", "coverage_probability"}
                         ) | INTERVAL_KEYS

#: Lowest coverage factor accepted on a certificate: k < 1 would state U < u (common practice).
MIN_COVERAGE_FACTOR = 1.0

REQUIRED = ("date", "value", "expanded_uncertainty", "coverage_factor")
OPTIONAL = ("temperature_C", "voltage_V", "certificate", "reference", "coverage_probability")
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
    references: tuple[str, ...] | None = None   # ``reference`` column; None without it
    dof: np.ndarray | None = None    # ν_i inferred from each row's k (inf: normal); None: all ∞
    k: np.ndarray | None = None      # coverage factors of the rows used
    coverage_probability: float = DEFAULT_CERTIFICATE_PROBABILITY   # p the k are stated for
    probability_stated: bool = False   # coverage_probability given in the spec or file
    probabilities: np.ndarray | None = None   # p of each row used
    unit: Unit | None = None     # unit the values were stated in (None: coherent SI)

    @property
    def scale(self) -> float:
        """Factor from the unit the file's values are stated in to coherent SI."""
        return 1.0 if self.unit is None else self.unit.scale


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
    u_independent: float = 0.0   # part of u not common to the calibrations (= u without u_c)
    u_common: float = 0.0        # part of u from the common reference (u_c·√(aᵀSa))
    common_standard_uncertainty: float = 0.0   # u_c as stated
    independent_cov: tuple[tuple[float, ...], ...] = ()   # parameter covariance without the
    #                                                      common part (days relative to at)
    warnings: tuple[Warning, ...] = ()   # the notes that change what the value means
    dof_reason: str = ""         # how ν was obtained when it comes from the certificates' k


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


def read_history(ctx: InputContext, *, voltage: bool = True, positive: bool = False,
                 what: str = "value", si: str = "Ω", stated: Unit | None = None,
                 stated_key: str = "unit") -> History:
    """Read and check the calibration history named by ``file``; apply ``exclude_rows``.

    ``positive`` refuses values ≤ 0 (a resistance or a transresistance), naming ``what``.
    A coverage factor below 1 is refused (it would state U < u). ``si`` is the coherent SI
    unit the values are used in (its dimension is the one a header unit must have);
    ``stated`` the unit the spec key ``stated_key`` gives the values in (None: coherent SI),
    refused when the header states another. The returned values and u are in ``si``."""
    path = ctx.path_of(ctx.option("file", str), "file")
    shown = ctx.display(path)
    optional = OPTIONAL if voltage else tuple(c for c in OPTIONAL if c != "voltage_V")
    rules = {"value": ColumnUnit(si, f"a {what}"),
             "expanded_uncertainty": ColumnUnit(si, f"a {what}", difference=True),
             "voltage_V": ColumnUnit("V", "a voltage")}
    df = read_table(path, REQUIRED, optional, shown=shown, units=rules)
    unit = column_unit(df, "value")
    if unit is not None and stated is not None and unit.scale != stated.scale:
        raise ctx.spec_error(stated_key, f"is {stated.text!r} but the header of {shown} gives "
                                         f"value [{unit.text}]; state the unit once")
    unit = unit or stated
    u_unit = column_unit(df, "expanded_uncertainty") or unit
    dates = date_column(df, "date", shown=shown)
    values = to_si(numeric_column(df, "value", shown=shown), unit)
    big_u = to_si(numeric_column(df, "expanded_uncertainty", shown=shown, positive=True),
                  u_unit, difference=True)
    k = numeric_column(df, "coverage_factor", shown=shown, positive=True)
    low_k = np.flatnonzero(k < MIN_COVERAGE_FACTOR)
    if low_k.size:
        i = int(low_k[0])
        raise DataError(f"a coverage factor below 1 states U smaller than u; got "
                        f"{df['coverage_factor'].iloc[i]!r} (k >= 1 expected, usually 2)",
                        file=shown, row=i + 1, field="coverage_factor")
    if positive:
        neg = np.flatnonzero(values <= 0)
        if neg.size:
            i = int(neg[0])
            raise DataError(f"a {what} must be > 0; got {df['value'].iloc[i]!r} (give the "
                            "magnitude)", file=shown, row=i + 1, field="value")
    dof, probs, p, p_stated = row_dofs(ctx, df, k, shown)
    temp = (numeric_column(df, "temperature_C", shown=shown, allow_blank=True)
            if "temperature_C" in df else None)
    volt = (to_si(numeric_column(df, "voltage_V", shown=shown, allow_blank=True),
                  column_unit(df, "voltage_V")) if "voltage_V" in df else None)
    certs = tuple(df["certificate"].str.strip()) if "certificate" in df else ("",) * len(df)
    refs = tuple(df["reference"].str.strip()) if "reference" in df else None

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
                   excluded=tuple(sorted(set(excluded))),
                   references=None if refs is None else tuple(
                       c for c, m in zip(refs, keep) if m),
                   dof=dof[keep], k=k[keep], coverage_probability=p,
                   probability_stated=p_stated, probabilities=probs[keep],
                   unit=None if unit is None or unit.scale == 1.0 else unit)


def common_covariance(ctx: InputContext, hist: History) -> tuple[float, np.ndarray | None]:
    """u_c (``common_standard_uncertainty``, default 0) and the sharing matrix S (None when
    u_c = 0). Refuses u_c ≥ u_i for any row, and u_c without stated uncertainties."""
    if "common_standard_uncertainty" not in ctx.table:
        return 0.0, None
    uc = ctx.number("common_standard_uncertainty", nonnegative=True) * hist.scale
    if uc == 0:
        return 0.0, None
    if hist.u is None:
        raise ctx.spec_error("common_standard_uncertainty", "needs the stated uncertainty of "
                             "each row (an 'uncertainty' column)")
    over = np.flatnonzero(hist.u <= uc)
    if over.size:
        i = int(over[0])
        raise DataError(f"its standard uncertainty U/k = {hist.u[i]:.6g} is not larger than "
                        f"common_standard_uncertainty = {uc:.6g} (spec {ctx.spec_file}, "
                        f"[inputs.{ctx.name}]); the common part is a part of each row's u",
                        file=hist.shown, row=int(hist.rows[i]), field="expanded_uncertainty")
    n = hist.u.size
    if hist.references is None:
        share = np.ones((n, n))
    else:
        ref = np.array(hist.references, dtype=object)
        share = (ref[:, None] == ref[None, :]) & (ref[:, None] != "")
        share = share.astype(float)
        np.fill_diagonal(share, 1.0)
    return uc, share


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
    uc, share = common_covariance(ctx, hist)
    try:
        if share is None:
            f = fit(days, values, hist.u, model=model, x0=0.0, inflate=policy, alpha=level)
        else:
            v_obs = np.diag(hist.u ** 2 - uc ** 2) + uc ** 2 * share
            f = fit(days, values, model=model, x0=0.0, inflate=policy, alpha=level, cov=v_obs)
    except BudgetError as exc:
        raise exc.located(file=hist.shown) from None
    value, u = f.predict(0.0)
    u_ind, u_com, cov_ind = _split_common(f, days, hist.u, uc, share)
    if share is not None:
        u = math.hypot(u_ind, u_com)
    last = hist.dates.max()
    past = float((at - last) / _DAY)
    notes = []
    ws = []
    if hist.unit is not None:
        notes.append(f"history values stated in {hist.unit.text}; converted to {hist.unit.si} "
                     f"(× {hist.unit.scale:.17g}) when read")
    if past > 0:
        extrapolation(ctx, hist.dates, at, past, event, notes, ws)
    if f.inflated:
        notes.append(f"scatter of the {event}s exceeds their stated uncertainties: {f.verdict}")
        ws.append(warn("history.inflated", notes[-1] + "; the covariance was scaled up"))
    elif f.weighted and f.nu > 0 and f.birge_ratio > 1:
        notes.append(f"Birge ratio {f.birge_ratio:.3g} > 1 but not inflated: {f.verdict}")
    if f.nu == 0:
        notes.append(f"{f.n} {event}(s) for {len(f.params)} parameter(s): the scatter "
                     "cannot be checked against the stated uncertainties")
        ws.append(warn("history.degenerate_fit", notes[-1]))
    if hist.excluded:
        notes.append(f"rows excluded by the spec (exclude_rows): {row_ranges(hist.excluded)}")
    if share is not None:
        groups = "one reference for all rows" if hist.references is None else (
            f"{len(set(r for r in hist.references if r))} reference(s) in the 'reference' "
            "column")
        notes.append(f"generalised least squares with a common part u_c = {uc:.6g} of each "
                     f"calibration's u ({groups}); it does not average away and is the row "
                     "NAME_common (JCGM 100 §5.2, F.1.2.3)".replace("NAME", ctx.name))
    dof, dof_reason = f.dof, ""
    if not f.inflated and math.isinf(f.dof):
        dof, dof_reason = dof_from_certificates(f, days, hist, uc, share)
    return DriftPrediction(fit=f, at=at, value=float(value), u=float(u), dof=dof,
                           days_past_last=past, notes=tuple(notes), u_independent=float(u_ind),
                           u_common=float(u_com), common_standard_uncertainty=float(uc),
                           independent_cov=cov_ind, warnings=tuple(ws), dof_reason=dof_reason)


def _split_common(f: Fit, days: np.ndarray, u: np.ndarray | None, uc: float,
                  share: np.ndarray | None) -> tuple[float, float, tuple]:
    """The prediction's standard uncertainty split into the independent part (inflated with
    the fit when the scatter exceeds the stated u) and the common part u_c·√(aᵀSa), and the
    independent part of the parameter covariance (days relative to the date of ``at``)."""
    c_all = f.covariance
    if share is None:
        return math.sqrt(max(c_all[0, 0], 0.0)), 0.0, f.cov
    design = (np.column_stack([np.ones(days.size), days]) if f.model == "line"
              else np.ones((days.size, 1)))
    c0 = c_all / f.scale                       # (XᵀV⁻¹X)⁻¹ before any inflation
    v_obs = np.diag(u ** 2 - uc ** 2) + uc ** 2 * share
    b = c0 @ np.linalg.solve(v_obs, design).T  # β̂ = B y
    c_common = uc ** 2 * (b @ share @ b.T)
    c_ind = f.scale * (c0 - c_common)
    u_com = math.sqrt(max(c_common[0, 0], 0.0))
    u_ind = math.sqrt(max(c_ind[0, 0], 0.0))
    return u_ind, u_com, tuple(tuple(float(v) for v in row) for row in c_ind)


def drift_quantity(ctx: InputContext, hist: History, pred: DriftPrediction, *, name: str,
                   unit: str, what: str, extra_notes: tuple[str, ...] = ()) -> Quantity:
    """The calibration/drift row: the fitted value at ``at`` with the line's uncertainty."""
    f = pred.fit
    u_row = pred.u_independent
    kind = "straight line" if f.model == "line" else "constant (weighted mean)"
    if pred.dof_reason:
        dist = Distribution.student_t(pred.value, u_row, pred.dof)
        dist_reason = ("scaled and shifted Student t with the ν the certificates' coverage "
                       "factors imply (JCGM 101 §6.4.9.7)")
        dof_reason = pred.dof_reason
    elif math.isinf(pred.dof):
        dist = Distribution.normal(pred.value, u_row)
        dist_reason = ("normal: the certificates state normal expanded uncertainties and the "
                       "prediction is a linear combination of them")
        dof_reason = ("infinite: the fit uses the certificates' stated uncertainties, which the "
                      "certificates give as reliable, and the scatter is consistent with them")
    else:
        dist = Distribution.student_t(pred.value, u_row, pred.dof)
        dist_reason = ("scaled and shifted Student t: the scale of the uncertainties was "
                       "estimated from the residuals of the fit (JCGM 101 §6.4.9)")
        dof_reason = (f"{f.nu} = n - p: the covariance was scaled by the residual scatter "
                      f"(chi2/nu = {f.reduced_chi2:.3g}), an estimate with n - p degrees of "
                      "freedom")
    method = (f"weighted least-squares {kind} through {f.n} calibrations (u_i = U_i/k_i) "
              f"against time, evaluated at {pred.at.isoformat()} with the uncertainty of the "
              "fitted line from the full parameter covariance (JCGM 100 H.3)")
    if pred.u_common > 0:
        method = ("generalised " + method[len("weighted "):] + "; the part common to the "
                  f"calibrations is the row {ctx.name}_common, not this one")
    ref = ctx.file_ref(hist.path, row_ranges(hist.rows))
    return Quantity(name=name, value=pred.value, standard_uncertainty=u_row, distribution=dist,
                    unit=unit, dof=pred.dof, evaluation="B",
                    description=f"{what} predicted at the measurement date from its "
                                "calibration history",
                    provenance=Provenance(origin=f"module:{ctx.table.get('module')}",
                                          method=method, distribution_reason=dist_reason,
                                          dof_reason=dof_reason, files=(ref,),
                                          notes=pred.notes + tuple(extra_notes),
                                          across_runs="shared", warnings=pred.warnings))


def common_quantity(ctx: InputContext, hist: History, pred: DriftPrediction, *, scale: float,
                    what: str) -> Quantity | None:
    """The row ``NAME_common``: the relative error of the prediction that comes from the
    reference common to the calibrations, normal about 0 with u = u_common/``scale``
    (``scale`` is the predicted value for a resistance, 1 for a fractional offset). None
    without ``common_standard_uncertainty``."""
    if pred.u_common <= 0:
        return None
    u = pred.u_common / abs(scale)
    ref = ctx.file_ref(hist.path, row_ranges(hist.rows))
    return Quantity(
        name=f"{ctx.name}_common", value=0.0, standard_uncertainty=u,
        distribution=Distribution.normal(0.0, u), unit="1", dof=math.inf, evaluation="B",
        description=f"relative error of the {what} common to its calibrations (the "
                    "calibrating laboratory's reference)",
        provenance=Provenance(
            origin=f"module:{ctx.table.get('module')}",
            method=(f"u_c = {pred.common_standard_uncertainty:.6g} common to the calibrations "
                    "(common_standard_uncertainty); the prediction carries u_c·√(aᵀSa) = "
                    f"{pred.u_common:.6g} of it (a: generalised least-squares weights of the "
                    "prediction, S: rows sharing a reference); it does not average away "
                    "(JCGM 100 §5.2, F.1.2.3)"),
            distribution_reason="normal: a part of the certificates' normal uncertainties",
            dof_reason="infinite: a stated certificate uncertainty (JCGM 100 G.4.2)",
            files=(ref,), across_runs="shared"))
