"""Relative correction terms shared by the instrument modules (temperature, bounds, offsets).

Each correction is a dimensionless quantity δ that enters the input as a factor ``(1 + δ)``;
the module's expression multiplies them onto the calibrated value, so each is its own budget row.
:func:`drift_result` finishes a module whose calibrated value comes from a calibration history
(``resistor``, ``amplifier``): history referred to reference conditions, drift prediction, the
NAME_cal row, diagnostics and the drift figure.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from ..distributions import Distribution
from ..errors import DataError
from ..numbers import overflow_checked
from ..quantity import FileRef, ModuleResult, Provenance, Quantity
from .context import InputContext
from .history import History, common_quantity, drift_quantity, predict_drift
from .history_report import drift_figure, history_diagnostics

__all__ = ["assemble", "drift_result", "stability_term", "TEMPERATURE_KEYS", "bounded_or_standard",
           "reference_level", "relative_term", "temperature_term"]

#: Option keys of the temperature correction δ_T = α·ΔT + β·ΔT², ΔT = T − T_ref.
TEMPERATURE_KEYS = frozenset({"alpha", "beta", "alpha_uncertainty", "beta_uncertainty",
                              "reference_temperature_C", "temperature_C",
                              "temperature_uncertainty_C", "temperature_half_width_C"})


def relative_term(ctx: InputContext, *, name: str, value: float, u: float | None = None,
                  half_width: float | None = None, description: str, method: str,
                  reason: str, files: tuple[FileRef, ...] = (),
                  notes: tuple[str, ...] = ()) -> Quantity:
    """A dimensionless relative correction: rectangular of half-width ``half_width`` about
    ``value`` when that is given and > 0, else normal with standard uncertainty ``u``.
    ``reason`` completes the distribution reason after "rectangular: " or "normal: "."""
    value = float(value) + 0.0  # turn a -0.0 into 0.0 for the record
    if half_width is not None and half_width > 0:
        dist = Distribution.rectangular(value - half_width, value + half_width)
        std = half_width / math.sqrt(3)
        why = "rectangular: " + reason
    else:
        std = 0.0 if u is None else float(u)
        dist = Distribution.normal(value, std)
        why = "normal: " + reason
    return Quantity(name=name, value=float(value), standard_uncertainty=float(std),
                    distribution=dist, unit="1", dof=math.inf, evaluation="B",
                    description=description,
                    provenance=Provenance(origin=f"module:{ctx.table.get('module')}",
                                          method=method, distribution_reason=why,
                                          dof_reason="infinite: a Type B bound or stated "
                                                     "uncertainty taken as reliable "
                                                     "(JCGM 100 G.4.2)",
                                          files=files, notes=notes))


def bounded_or_standard(ctx: InputContext, u_key: str, bound_key: str, *,
                        required_with: str | None = None,
                        name_bound: bool = False) -> tuple[float, float]:
    """Read an uncertainty given either as a standard uncertainty (normal) under ``u_key`` or
    as a half-width bound (rectangular) under ``bound_key``; at most one of them.

    Parameters
    ----------
    required_with : str, optional
        When given, one of the two must be > 0; otherwise a spec error "is required
        {required_with} (or give the other key)" names ``u_key`` (``bound_key`` when
        ``name_bound``). Default: both may be absent.

    Returns ``(u, half_width)`` with the one not given as 0.
    """
    if u_key in ctx.table and bound_key in ctx.table:
        raise ctx.spec_error(bound_key, f"give either '{u_key}' (standard uncertainty, normal) "
                                        f"or '{bound_key}' (half-width, rectangular), not both")
    u = ctx.number(u_key, 0.0, nonnegative=True)
    half_width = ctx.number(bound_key, 0.0, nonnegative=True)
    if required_with is not None and u == 0 and half_width == 0:
        key, other = (bound_key, u_key) if name_bound else (u_key, bound_key)
        raise ctx.spec_error(key, f"is required {required_with} (or give {other})")
    return u, half_width


def reference_level(ctx: InputContext, key: str, column: np.ndarray | None, *, what: str,
                    column_name: str) -> tuple[float, str, np.ndarray | None]:
    """A reference condition (T_ref, V_cal): stated under ``key``, else the mean of the
    history's ``column`` (NaN where blank).

    Returns
    -------
    level : float
    origin : str
        Where it came from, for the method text and diagnostics.
    deviations : ndarray or None
        Each calibration's condition minus the level (0 where blank); None when the history
        has no value in that column.
    """
    usable = column if column is not None and np.isfinite(column).any() else None
    if key in ctx.table or usable is None:
        level, origin = ctx.number(key), "stated in the spec"
    else:
        level = float(np.nanmean(usable))
        origin = f"mean {what} of the calibrations ({column_name} column)"
    deviations = None if usable is None else np.where(np.isfinite(usable), usable - level, 0.0)
    return level, origin, deviations


def temperature_term(ctx: InputContext, *, name: str, what: str,
                     history_temperature: np.ndarray | None = None
                     ) -> tuple[Quantity | None, np.ndarray | None, dict]:
    """The relative temperature correction of a standard, when any temperature key is given.

    δ_T = α·ΔT + β·ΔT², ΔT = T − T_ref, with α (1/K), β (1/K²), T the temperature during the
    measurement (°C) and T_ref the reference temperature (°C; default: the mean of the history's
    ``temperature_C`` column). The standard uncertainty follows from the sensitivities
    ∂δ/∂T = α + 2βΔT, ∂δ/∂α = ΔT, ∂δ/∂β = ΔT² (JCGM 100 eq. 10, independent inputs).

    Returns
    -------
    quantity or None
        The δ_T row, or None when no temperature key is given.
    factors or None
        1 + δ_T(T_i) for each history row with a temperature (1 where blank): dividing the
        history values by them refers each calibration to T_ref. None without that column.
    diagnostics : dict
    """
    if not any(k in ctx.table for k in TEMPERATURE_KEYS):
        return None, None, {"temperature": "no temperature correction requested"}
    alpha = ctx.number("alpha")
    beta = ctx.number("beta", 0.0)
    u_alpha = ctx.number("alpha_uncertainty", 0.0, nonnegative=True)
    u_beta = ctx.number("beta_uncertainty", 0.0, nonnegative=True)
    t_meas = ctx.number("temperature_C")
    u_t, hw_t = bounded_or_standard(ctx, "temperature_uncertainty_C", "temperature_half_width_C")
    if u_t == 0 and hw_t == 0 and u_alpha == 0 and u_beta == 0:
        raise ctx.spec_error("temperature_uncertainty_C",
                             "is required with a temperature correction (or give "
                             "temperature_half_width_C, alpha_uncertainty or beta_uncertainty); "
                             "a correction without an uncertainty would be a silent claim")
    t_ref, ref_reason, d_i = reference_level(ctx, "reference_temperature_C",
                                             history_temperature, what="temperature",
                                             column_name="temperature_C")

    def terms():
        dt = t_meas - t_ref
        c_t = alpha + 2 * beta * dt
        u_temp = hw_t / math.sqrt(3) if hw_t > 0 else u_t
        u = math.sqrt((c_t * u_temp) ** 2 + (dt * u_alpha) ** 2 + (dt * dt * u_beta) ** 2)
        factors = None if d_i is None else 1.0 + alpha * d_i + beta * d_i * d_i
        return dt, alpha * dt + beta * dt * dt, c_t, u, factors, abs(c_t) * hw_t

    # huge coefficients or temperatures (1e308) overflow: a located error, not inf or a crash
    dt, value, c_t, u, factors, half_t = overflow_checked(
        terms, "the temperature correction α·ΔT + β·ΔT² (or its uncertainty)",
        lambda msg: ctx.spec_error("temperature_C", msg))
    notes = []
    only_temperature = (dt * u_alpha == 0 and dt * dt * u_beta == 0)
    if hw_t > 0 and only_temperature and c_t != 0:
        half = half_t
        reason = (f"the temperature is bounded by ±{hw_t:g} K and δ_T is (to first order) "
                  "linear in it, so the bound maps to a bound on δ_T")
        if beta != 0:
            notes.append("β·ΔT² curvature neglected inside the temperature bound")
    else:
        half = None
        reason = ("δ_T combines several contributions (temperature, coefficients); a normal "
                  "distribution is assigned to their combination")
    if d_i is not None:
        notes.append("history values referred to T_ref with the nominal α, β before the fit; "
                     "the coefficients' uncertainty on these small corrections is neglected")
    q = relative_term(
        ctx, name=name, value=value, u=u, half_width=half,
        description=f"relative temperature correction of the {what}",
        method=(f"δ_T = α·ΔT + β·ΔT² with α = {alpha:g} /K, β = {beta:g} /K², T = {t_meas:g} °C, "
                f"T_ref = {t_ref:g} °C ({ref_reason}); u from the sensitivities to T, α and β"),
        reason=reason, notes=tuple(notes))
    diag = {"temperature": {"alpha_per_K": alpha, "beta_per_K2": beta,
                            "reference_temperature_C": t_ref, "temperature_C": t_meas,
                            "delta_T_K": dt, "correction": value, "standard_uncertainty": u,
                            "reference_from": ref_reason}}
    return q, factors, diag


def stability_term(ctx: InputContext, *, name: str, what: str) -> Quantity | None:
    """The relative long-term stability / transport term ``stability_bound`` (rectangular about
    0, relative half-width < 1), or None when the key is not given."""
    if "stability_bound" not in ctx.table:
        return None
    bound = ctx.number("stability_bound", positive=True)
    if bound >= 1:
        # a relative change of 100 % or more is no stability bound (and 1 + δ could reach 0)
        raise ctx.spec_error("stability_bound", f"is relative and must be < 1; got {bound!r}")
    return relative_term(
        ctx, name=name, value=0.0, half_width=bound,
        description=f"relative change of the {what} between calibrations (stability bound)",
        method=f"stated bound ±{bound:g} (relative) on the change since calibration",
        reason=("only a bound is known, with no reason to prefer any value inside it "
                "(JCGM 100 4.3.7)"))


def assemble(ctx: InputContext, main: Quantity, terms: list[tuple[str, Quantity]],
             diagnostics: dict) -> ModuleResult:
    """One quantity named NAME when there are no correction terms; otherwise NAME_cal times
    (1 + NAME_suffix) for each term, with the expression that combines them."""
    if not terms:
        return ModuleResult(quantities=(dataclasses.replace(main, name=ctx.name),),
                            diagnostics=diagnostics)
    expr = " * ".join([main.name] + [f"(1 + {q.name})" for _, q in terms])
    return ModuleResult(quantities=(main,) + tuple(q for _, q in terms), expression=expr,
                        diagnostics=diagnostics)


def drift_result(ctx: InputContext, hist: History, at, corrections: list[tuple], *, unit: str,
                 what: str, figure_what: str, extra_notes: tuple[str, ...] = (),
                 extra_diagnostics: dict | None = None) -> ModuleResult:
    """The result of a module whose calibrated value is predicted from a calibration history.

    Parameters
    ----------
    ctx : InputContext
    hist : History
        The calibration history (:func:`budget.inputs.history.read_history`).
    at : pandas.Timestamp
        The measurement date.
    corrections : list of (suffix, Quantity or None, factors or None, dict)
        The relative corrections in the order of the expression: the row NAME_suffix (None when
        not configured), the factors 1 + δ(condition_i) that refer each calibration to reference
        conditions before the fit (None when the history has no such column), and the
        correction's diagnostics.
    unit : str
        Unit of the history values and of NAME_cal.
    what, figure_what : str
        What NAME_cal is ("resistance at reference conditions") and what the figure shows.
    extra_notes : tuple of str
        Notes added to the NAME_cal row. Default none.
    extra_diagnostics : dict, optional
        Added after the corrections' diagnostics, before the figure.
    """
    values = hist.values
    for _, _, factors, _ in corrections:
        if factors is not None:
            values = values / factors
    pred = predict_drift(ctx, hist, values, at)
    if pred.value == 0:
        # every other row of these modules is relative to the calibrated value (the corrections
        # multiply it, the figure shows parts in 10^6 of it): a value of 0 has no such scale
        raise DataError(f"the history predicts {what} = 0 {unit} at the measurement date; a "
                        "calibrated value of 0 cannot carry relative corrections",
                        file=hist.shown, field="value")
    main = drift_quantity(ctx, hist, pred, name=f"{ctx.name}_cal", unit=unit, what=what,
                          extra_notes=extra_notes)
    reference = ctx.number("nominal", pred.value / hist.scale, positive=True) * hist.scale
    diagnostics = history_diagnostics(hist, values, pred, unit=unit)
    for *_, diag in corrections:
        diagnostics.update(diag)
    diagnostics.update(extra_diagnostics or {})
    diagnostics["figures"] = [drift_figure(ctx, hist, values, pred, unit=unit, what=figure_what,
                                           reference=reference)]
    terms = [(suffix, q) for suffix, q, _, _ in corrections if q is not None]
    q_common = common_quantity(ctx, hist, pred, scale=pred.value, what=what)
    if q_common is not None:
        terms.insert(0, ("common", q_common))
    return assemble(ctx, main, terms, diagnostics)
