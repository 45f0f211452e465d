"""Input module ``frequency``: the actual frequency of the pump drive, f = f_nom·(1 + y).

y is the fractional frequency offset of the reference (rubidium, GNSS-disciplined ...) and its
uncertainty is built from up to three terms, each its own budget row:

* **offset** ``NAME_offset`` — from a comparison typed in (``offset`` with
  ``offset_uncertainty`` or ``offset_bound``), or from a comparison CSV (``file``) fitted against
  time (constant by default, or a linear aging line) and predicted at ``at``;
* **aging** ``NAME_aging`` — a specification bound ``aging_per_day`` × days since the comparison,
  rectangular about 0;
* **stability** ``NAME_stab`` — an Allan-deviation specification σ_y(τ) turned into the
  uncertainty of the mean frequency over the measurement time T by the power law of the stated
  noise type, σ_y(T) = σ_y(τ)·(T/τ)^(μ/2).

No data file is required.

Spec keys (``[inputs.NAME]``, besides ``module = "frequency"``)
---------------------------------------------------------------
nominal_Hz : float
    Nominal (set) frequency, Hz (> 0). Required unless ``nominal_frequency`` is given.
nominal_frequency : table
    Alternatively the nominal frequency with its unit, ``{value = 600, unit = "MHz"}``; a unit
    that is not a frequency is refused. Not together with ``nominal_Hz``.
offset : float
    Fractional offset y from a comparison or specification. Default 0.
offset_uncertainty, offset_bound : float
    Its standard uncertainty (normal) or the half-width of a bound (rectangular, e.g. an
    accuracy specification). One of them, or ``file``, gives the offset row.
offset_dof : float
    Degrees of freedom of ``offset_uncertainty``. Default infinite.
file : str
    Comparison CSV with columns ``date`` (ISO 8601), ``fractional_offset`` and optional
    ``uncertainty`` (standard uncertainty of each offset) and ``reference``. The header may
    give a dimensionless scale, ``fractional_offset [10⁻¹²]`` (``uncertainty`` then in the same
    scale unless its header gives its own; ``common_standard_uncertainty`` too); any other
    dimension is refused naming the file and column. Without ``uncertainty`` the fit is
    unweighted with ν = n − p (Type A). Not together with ``offset`` keys.
at : str or TOML date-time
    Measurement date (ISO 8601); required with ``file`` or ``comparison_date``.
drift : {"constant", "linear"}
    Model of the comparison series. Default ``"constant"``.
inflate, consistency_level : str, float
    Inflation policy for a weighted comparison fit (``"chi2-test"`` default) and its level
    (default 0.05), as in :mod:`budget.stats.regression`.
aging_per_day : float
    Bound on the fractional frequency change per day (e.g. 5e-12).
days_since_comparison : float
    Days since the comparison. Default: from ``comparison_date`` and ``at``, or from the last
    row of ``file`` and ``at``.
comparison_date : str
    Date of the comparison (ISO 8601), with ``at``.
allan_deviation, allan_tau_s : float
    Specified Allan deviation σ_y (fractional) at averaging time τ (s).
measurement_time_s : float
    Duration T over which the mean frequency matters (s); required with ``allan_deviation``.
noise : {"white-fm", "white-pm", "flicker-fm", "random-walk-fm"}
    Noise type behind the power law: μ = −1, −2, 0, +1 (σ_y ∝ τ^(μ/2)). Default ``"white-fm"``.
allan_tau_max_s : float
    Largest averaging time for which the stated noise type holds (s), e.g. from the
    specification's table of σ_y(τ). Default 100 × ``allan_tau_s``. The power law is used only
    on [``allan_tau_s``, ``allan_tau_max_s``]: T below ``allan_tau_s`` is refused; above
    ``allan_tau_max_s`` a falling law (white PM/FM) is held at its value there (a flicker floor
    assumed) and a rising one is extrapolated with a note. The range is in the notes.
common_standard_uncertainty : float
    Part of each comparison's ``uncertainty`` common to all comparisons (or to rows with the
    same ``reference`` column text): generalised least squares and the row ``NAME_common``, as
    in :mod:`budget.inputs.history`.

Quantities
----------
With one term, a single quantity NAME in Hz. With several, the fractional rows and the
expression ``f_nom * (1 + NAME_offset) * (1 + NAME_aging) * (1 + NAME_stab)`` with f_nom
written as a number.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pandas as pd

from ..distributions import Distribution
from ..errors import DataError
from ..quantity import ModuleResult, Provenance, Quantity
from ..units import UnitError, dim_text, parse_unit
from ..warnings import warn
from .column_units import ColumnUnit, column_unit, to_si
from .context import InputContext
from .corrections import bounded_or_standard, relative_term
from .history import History, common_quantity, parse_when, predict_drift
from .tables import date_column, numeric_column, read_table, row_ranges

__all__ = ["KEYS", "evaluate", "NOISE_EXPONENTS"]

#: Allan-variance power-law exponent μ (σ_y² ∝ τ^μ) of each noise type (NIST SP 1065, memory).
NOISE_EXPONENTS = {"white-pm": -2, "white-fm": -1, "flicker-fm": 0, "random-walk-fm": 1}

#: Default end of the range of the power law, as a multiple of allan_tau_s (two decades; a
#: choice of this project, stated in the notes: beyond it a flicker floor is assumed).
TAU_RANGE = 100.0

_OFFSET_KEYS = ("offset", "offset_uncertainty", "offset_bound", "offset_dof")
_FILE_KEYS = ("file", "drift", "inflate", "consistency_level", "common_standard_uncertainty")
KEYS = frozenset({"nominal_Hz", "nominal_frequency", "at", "aging_per_day", "days_since_comparison",
                  "comparison_date", "allan_deviation", "allan_tau_s", "measurement_time_s",
                  "noise", "allan_tau_max_s", *_OFFSET_KEYS, *_FILE_KEYS})


def _offset_from_file(ctx: InputContext, name: str
                      ) -> tuple[Quantity, pd.Timestamp, dict, Quantity | None]:
    path = ctx.path_of(ctx.option("file", str), "file")
    shown = ctx.display(path)
    rules = {"fractional_offset": ColumnUnit("1", "a fractional frequency offset"),
             "uncertainty": ColumnUnit("1", "a fractional frequency offset", difference=True)}
    df = read_table(path, ("date", "fractional_offset"), ("uncertainty", "reference"),
                    shown=shown, units=rules)
    dates = date_column(df, "date", shown=shown)
    y_unit = column_unit(df, "fractional_offset")
    y = to_si(numeric_column(df, "fractional_offset", shown=shown), y_unit)
    # a fractional offset f/f_nom − 1 of ±1 or more means f ≤ 0 or a value typed in Hz
    far = np.flatnonzero(np.abs(y) >= 1)
    if far.size:
        raise DataError(f"a fractional offset (f/f_nom − 1) must lie in (−1, 1); got "
                        f"{df['fractional_offset'].iloc[far[0]]!r}", file=shown,
                        row=int(far[0]) + 1, field="fractional_offset")
    u = (to_si(numeric_column(df, "uncertainty", shown=shown, positive=True),
               column_unit(df, "uncertainty") or y_unit, difference=True)
         if "uncertainty" in df else None)
    rows = np.arange(1, len(df) + 1)
    refs = tuple(df["reference"].str.strip()) if "reference" in df else None
    hist = History(path=path, shown=shown, rows=rows, dates=dates, values=y, u=u,
                   temperature=None, voltage=None, certificates=("",) * len(df), excluded=(),
                   references=refs,
                   unit=None if y_unit is None or y_unit.scale == 1.0 else y_unit)
    at = parse_when(ctx, "at")
    pred = predict_drift(ctx, hist, y, at, default_drift="constant", event="comparison")
    f = pred.fit
    u_row = pred.u_independent
    if math.isfinite(pred.dof):
        dist = Distribution.student_t(pred.value, u_row, pred.dof)
        dist_reason = ("scaled and shifted Student t: the scale was estimated from the scatter "
                       "of the comparisons (JCGM 101 §6.4.9)")
        dof_reason = f"{f.nu} = n - p of the fit"
    else:
        dist = Distribution.normal(pred.value, u_row)
        dist_reason = "normal: a linear combination of comparisons with stated uncertainties"
        dof_reason = "infinite: stated uncertainties, scatter consistent with them"
    q = Quantity(
        name=name, value=pred.value, standard_uncertainty=u_row, distribution=dist, unit="1",
        dof=pred.dof, evaluation="A" if u is None or f.inflated else "B",
        description="fractional frequency offset of the reference, from comparisons",
        provenance=Provenance(
            origin="module:frequency",
            method=(f"{_fit_kind(f.weighted, pred.u_common)} least-squares "
                    f"{'line' if f.model == 'line' else 'constant'} through {f.n} comparisons, "
                    f"evaluated at {at.isoformat()} (JCGM 100 H.3)"),
            distribution_reason=dist_reason, dof_reason=dof_reason,
            files=(ctx.file_ref(path, row_ranges(rows)),), notes=pred.notes,
            across_runs="shared", warnings=pred.warnings))
    diag = {"comparison": {"fit": f.to_dict(), "predicted_offset": pred.value,
                           "u": pred.u, "u_independent": pred.u_independent,
                           "u_common": pred.u_common, "at": at.isoformat(),
                           "independent_cov": [list(r) for r in pred.independent_cov],
                           "last_comparison": dates.max().isoformat(),
                           "days_since_last_comparison": pred.days_past_last}}
    # the common part is its own row, named NAME_common like the other history modules'
    q_common = common_quantity(ctx, hist, pred, scale=1.0, what="fractional frequency offset")
    return q, dates.max(), diag, q_common


def _fit_kind(weighted: bool, u_common: float) -> str:
    if u_common:
        return "generalised"
    return "weighted" if weighted else "unweighted"


def _offset_typed(ctx: InputContext, name: str) -> Quantity | None:
    if not any(k in ctx.table for k in _OFFSET_KEYS):
        return None
    y = ctx.number("offset", 0.0)
    if not -1 < y < 1:   # f/f_nom − 1 ≤ −1 is a frequency ≤ 0; ≥ 1 is almost surely Hz, not 1
        raise ctx.spec_error("offset", f"is fractional (f/f_nom − 1) and must lie in (−1, 1); "
                                       f"got {y!r}")
    u, hw = bounded_or_standard(ctx, "offset_uncertainty", "offset_bound",
                                required_with="with 'offset'")
    if "offset_dof" in ctx.table and hw > 0:
        raise ctx.spec_error("offset_dof", "applies to offset_uncertainty, not to a bound")
    dof = ctx.number("offset_dof", positive=True) if "offset_dof" in ctx.table else math.inf
    q = relative_term(
        ctx, name=name, value=y, u=u, half_width=hw,
        description="fractional frequency offset of the reference",
        method=(f"y = {y:g} with " + (f"a bound ±{hw:g}" if hw > 0 else f"u = {u:g}")
                + " (comparison or specification)"),
        reason=("a specification bound (JCGM 100 4.3.7)" if hw > 0
                else "a stated standard uncertainty"))
    if math.isfinite(dof):
        q = dataclasses.replace(q, dof=dof, distribution=Distribution.student_t(y, u, dof),
                                provenance=dataclasses.replace(
                                    q.provenance, dof_reason="stated (offset_dof)",
                                    distribution_reason="scaled and shifted Student t with "
                                    "the stated degrees of freedom (JCGM 101 §6.4.9)"))
    return q


def _aging(ctx: InputContext, name: str, last_comparison: pd.Timestamp | None
           ) -> Quantity | None:
    if "aging_per_day" not in ctx.table:
        for k in ("days_since_comparison", "comparison_date"):
            if k in ctx.table:
                raise ctx.spec_error(k, "is used only with aging_per_day")
        return None
    rate = ctx.number("aging_per_day", nonnegative=True)
    if "days_since_comparison" in ctx.table:
        if "comparison_date" in ctx.table:
            raise ctx.spec_error("comparison_date", "give either days_since_comparison or "
                                                    "comparison_date, not both")
        days = ctx.number("days_since_comparison", nonnegative=True)
        since = f"{days:g} days (stated)"
    else:
        if "comparison_date" in ctx.table:
            start = parse_when(ctx, "comparison_date")
        elif last_comparison is not None:
            start = last_comparison
        else:
            raise ctx.spec_error("days_since_comparison", "is required with aging_per_day (or "
                                 "give comparison_date and at, or a comparison file)")
        at = parse_when(ctx, "at")
        days = float((at - start) / pd.Timedelta(days=1))
        if days < 0:
            raise ctx.spec_error("at", f"is before the comparison ({start.isoformat()})")
        since = f"{days:.2f} days from {start.isoformat()} to {at.isoformat()}"
    hw = rate * days
    if hw == 0:
        return None
    notes = ()
    if ctx.table.get("drift") == "linear":
        notes = ("a linear aging line is also fitted to the comparisons: this bound may count "
                 "the aging twice",)
    return relative_term(
        ctx, name=name, value=0.0, half_width=hw,
        description="frequency aging of the reference since the comparison",
        method=f"±{rate:g} per day × {since}",
        reason=("a specification bound on the aging, with no preferred value inside it "
                "(JCGM 100 4.3.7)"), notes=notes)


def _stability(ctx: InputContext, name: str) -> tuple[Quantity | None, dict]:
    keys = ("allan_deviation", "allan_tau_s", "measurement_time_s", "noise", "allan_tau_max_s")
    if not any(k in ctx.table for k in keys):
        return None, {}
    sigma = ctx.number("allan_deviation", positive=True)
    tau = ctx.number("allan_tau_s", positive=True)
    t_meas = ctx.number("measurement_time_s", positive=True)
    noise = ctx.choice("noise", tuple(NOISE_EXPONENTS), "white-fm")
    tau_max = ctx.number("allan_tau_max_s", TAU_RANGE * tau, positive=True)
    if tau_max < tau:
        raise ctx.spec_error("allan_tau_max_s", f"must be >= allan_tau_s = {tau:g} s; got "
                                                f"{tau_max:g}")
    if t_meas < tau:
        # a specification at τ says nothing about shorter averaging (white PM and flicker
        # can rise steeply below it): no power law is used downwards
        raise ctx.spec_error("measurement_time_s", f"= {t_meas:g} s is below allan_tau_s = "
                             f"{tau:g} s; the power law is not extrapolated below the "
                             "specified averaging time (give σ_y at a τ <= T)")
    mu = NOISE_EXPONENTS[noise]
    notes = [f"power law of {noise} used over τ = {tau:g} s … {tau_max:g} s "
             f"(allan_tau_s … allan_tau_max_s); T = {t_meas:g} s"]
    t_used = t_meas
    if t_meas > tau_max:
        if mu < 0:
            # a falling law cannot be trusted to keep falling: flicker FM sets a floor in every
            # real oscillator, so σ_y is held at its value at the end of the range
            t_used = tau_max
            notes.append(f"T is {t_meas / tau_max:.3g} times the end of the range: σ_y is held "
                         f"at its value at τ = {tau_max:g} s (a flicker floor assumed) instead of "
                         f"falling further; give allan_tau_max_s from the specification to "
                         "extend the range")
        else:
            notes.append(f"T is {t_meas / tau_max:.3g} times the end of the range: the rising "
                         f"{noise} law is extrapolated beyond it")
    u = sigma * (t_used / tau) ** (mu / 2)
    q = relative_term(
        ctx, name=name, value=0.0, u=u,
        description="frequency instability averaged over the measurement time",
        method=(f"σ_y(T) = σ_y(τ)·(T/τ)^(μ/2) with σ_y({tau:g} s) = {sigma:g}, T = {t_used:g} s,"
                f" {noise} (μ = {mu}); the Allan deviation at τ = T is taken as the standard "
                "uncertainty of the mean fractional frequency over T"),
        reason=("the mean of many fluctuations over T (central limit); for white frequency "
                "noise the Allan variance at τ equals the variance of τ-averages"),
        notes=tuple(notes))
    ws = tuple(warn("frequency.extrapolation", n) for n in notes[1:])
    q = dataclasses.replace(q, provenance=dataclasses.replace(q.provenance,
                                                              across_runs="independent",
                                                              warnings=ws))
    return q, {"stability": {"allan_deviation": sigma, "allan_tau_s": tau,
                             "allan_tau_max_s": tau_max, "measurement_time_s": t_meas,
                             "averaging_time_used_s": t_used, "held_at_range_end":
                             t_used != t_meas, "noise": noise, "mu": mu, "sigma_y_at_T": u}}


def _absolute(q: Quantity, name: str, nominal: float) -> Quantity:
    """A fractional quantity y turned into f = f_nom·(1 + y) in Hz (the single-row case)."""
    d = q.distribution
    if d.kind == "rectangular":
        dist = Distribution.rectangular(nominal * (1 + d.low), nominal * (1 + d.high))
    elif d.kind == "student-t":
        dist = Distribution.student_t(nominal * (1 + d.loc), nominal * d.scale, d.dof)
    else:
        dist = Distribution.normal(nominal * (1 + q.value), nominal * q.standard_uncertainty)
    return dataclasses.replace(
        q, name=name, value=nominal * (1 + q.value),
        standard_uncertainty=nominal * q.standard_uncertainty, distribution=dist, unit="Hz",
        description="actual frequency of the pump drive",
        provenance=dataclasses.replace(
            q.provenance, method=q.provenance.method + f"; f = {nominal:g} Hz × (1 + y)"))


def _nominal(ctx: InputContext) -> float:
    """f_nom in Hz from ``nominal_Hz`` or ``nominal_frequency = {value, unit}``."""
    if "nominal_frequency" not in ctx.table:
        return ctx.number("nominal_Hz", positive=True)
    if "nominal_Hz" in ctx.table:
        raise ctx.spec_error("nominal_frequency", "give nominal_Hz or nominal_frequency, not both")
    t = ctx.table["nominal_frequency"]
    if not (isinstance(t, dict) and set(t) == {"value", "unit"}
            and isinstance(t["value"], (int, float)) and not isinstance(t["value"], bool)
            and isinstance(t["unit"], str)):
        raise ctx.spec_error("nominal_frequency", "must be a table {value = NUMBER, unit = "
                                                  "\"UNIT\"}, e.g. {value = 600, unit = \"MHz\"}")
    try:
        unit = parse_unit(t["unit"])
    except UnitError as exc:
        raise ctx.spec_error("nominal_frequency", str(exc)) from None
    if unit.dims != parse_unit("Hz").dims:
        raise ctx.spec_error("nominal_frequency", f"{t['unit']!r} is {dim_text(unit.dims)}, "
                                                  "not a frequency (Hz)")
    f = float(t["value"]) * unit.scale
    if not (math.isfinite(f) and f > 0):
        raise ctx.spec_error("nominal_frequency", f"must be > 0 and finite; got {t['value']!r}")
    return f


def evaluate(ctx: InputContext) -> ModuleResult:
    """Evaluate a ``frequency`` input (see the module docstring for the keys)."""
    nominal = _nominal(ctx)
    diagnostics: dict = {"nominal_Hz": nominal}
    last = None
    if "file" in ctx.table:
        for k in _OFFSET_KEYS:
            if k in ctx.table:
                raise ctx.spec_error(k, "give either a comparison file or a typed-in offset, "
                                        "not both")
        q_off, last, d, q_common = _offset_from_file(ctx, f"{ctx.name}_offset")
        diagnostics.update(d)
    else:
        q_common = None
        for k in _FILE_KEYS[1:]:
            if k in ctx.table:
                raise ctx.spec_error(k, "applies only to a comparison file ('file')")
        q_off = _offset_typed(ctx, f"{ctx.name}_offset")
    if "at" in ctx.table and "file" not in ctx.table and "comparison_date" not in ctx.table:
        raise ctx.spec_error("at", "is used only with a comparison file or comparison_date")
    q_age = _aging(ctx, f"{ctx.name}_aging", last)
    q_stab, d = _stability(ctx, f"{ctx.name}_stab")
    diagnostics.update(d)
    terms = [q for q in (q_off, q_common, q_age, q_stab) if q is not None]
    if not terms:
        raise ctx.spec_error("nominal_Hz", "no uncertainty source for the frequency: give "
                             "offset_uncertainty or offset_bound, a comparison file, "
                             "aging_per_day or allan_deviation")
    rel_u = math.sqrt(sum(q.standard_uncertainty ** 2 for q in terms))
    diagnostics["relative_standard_uncertainty"] = rel_u
    diagnostics["fractional_offset"] = sum(q.value for q in terms)
    if len(terms) == 1:
        return ModuleResult(quantities=(_absolute(terms[0], ctx.name, nominal),),
                            diagnostics=diagnostics)
    expr = " * ".join([repr(float(nominal))] + [f"(1 + {q.name})" for q in terms])
    return ModuleResult(quantities=tuple(terms), expression=expr, diagnostics=diagnostics,
                        unit="Hz")
