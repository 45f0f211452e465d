"""Input module ``voltmeter``: the gain correction factor g of a voltmeter calibrated against a
Josephson voltage standard, with its specification terms.

g multiplies the reading: a true voltage difference is g·ΔV_read. Two ways to obtain it:

* **calibration table** (``file``): CSV with ``reference_V`` (the Josephson voltage) and
  ``reading_V``, optionally ``reading_uncertainty_V`` (standard uncertainty of each reading),
  in V unless the header gives a voltage unit (``reading_V [mV]``; the uncertainty then in the
  reading's unit unless its header gives its own); converted to V when read, another
  dimension refused naming the file and column.
  The readings are fitted against the reference by least squares — ``fit = "offset"``
  (default; reading = G·V_ref + b, so a zero offset of the voltmeter does not bias the gain,
  and it cancels in the on/off difference anyway) or ``fit = "origin"`` (reading = G·V_ref).
  g = 1/G with u(g) = u(G)/G². Without ``reading_uncertainty_V`` the fit is unweighted and the
  scale comes from the residual scatter with ν = n − p (JCGM 100 H.3): a Type A evaluation.
  The largest residual gives a linearity term (see ``linearity``).
* **certificate** (``gain``): the certificate's value with ``gain_uncertainty`` (standard) or
  ``gain_expanded_uncertainty`` and ``gain_coverage_factor``, and ``gain_dof``.

Spec keys (``[inputs.NAME]``, besides ``module = "voltmeter"``)
---------------------------------------------------------------
file : str
    Calibration table (see above). Exactly one of ``file`` and ``gain``.
fit : {"offset", "origin"}
    Fitted line for the table. Default ``"offset"``.
inflate, consistency_level : str, float
    With ``reading_uncertainty_V``: inflation policy when the residuals exceed the stated
    uncertainties (``"chi2-test"`` default, ``"birge"``, ``"never"``) and the test level
    (default 0.05), as in :mod:`budget.stats.regression`.
gain : float
    Certificate value (dimensionless).
gain_is : {"correction", "reading-ratio"}
    Whether ``gain`` is the correction factor g (default) or the ratio G = reading/reference,
    from which g = 1/G.
gain_uncertainty : float
    Standard uncertainty of ``gain`` (same convention as ``gain``).
gain_expanded_uncertainty, gain_coverage_factor : float
    Alternatively U and k of the certificate; u = U/k. k must be at least 1.
gain_coverage_probability : float
    The coverage probability the certificate states k for (default 0.95). Unless ``gain_dof``
    is given, ν follows from k = t_p(ν) (:func:`budget.coverage.dof_from_coverage_factor`,
    JCGM 100 G.4–G.6): k = 2.87 at 95 % gives ν = 3.7, k = 2 at 95 % gives ν = 60, and k = 2 at
    0.9545 gives ν = ∞.
gain_dof : float
    Degrees of freedom of the certificate's uncertainty. Default: inferred from k as above with
    U and k, else infinite.
working_voltage_V : float
    Size of the measured voltage (|ΔV|, V). Required for the linearity from the table and for
    ``resolution_V``, which are absolute in volts and enter relative to it.
linearity : float or "from-fit"
    Relative half-width of the nonlinearity (rectangular), e.g. from the specification; or
    ``"from-fit"`` (the default with a table): max |residual| / working_voltage_V over the
    calibration points *near the working voltage*, those with
    V_w/linearity_factor ≤ |reference_V| ≤ linearity_factor·V_w (both polarities: the
    nonlinearity at V_w is what the points around it show, not the largest deviation anywhere
    on the range). With fewer than 2 such points the largest residual of the whole table is
    used and the warning ``voltmeter.linearity_range`` says that the table does not cover the
    working voltage. With a certificate and no ``linearity`` key there is no linearity row.
linearity_factor : float
    The neighbourhood's factor (> 1). Default 2 (an octave either side of V_w).
resolution_V : float
    Size of one digit of the reading (V): half a digit bounds the rounding error, rectangular
    (JCGM 100 F.2.2.1), relative to ``working_voltage_V``.
stability : float
    Relative half-width of the change allowed since calibration (rectangular); below 1 (a
    relative bound of 1 or more would allow a gain of zero or of the opposite sign).
stability_per_day, calibration_date, at
    Alternatively a bound growing linearly with time: stability_per_day × days between
    ``calibration_date`` and ``at`` (ISO 8601). Not together with ``stability``.

Quantities
----------
A single quantity NAME when there are no specification terms; otherwise ``NAME_cal`` and the
relative terms ``NAME_lin``, ``NAME_res``, ``NAME_stab`` with the expression
``NAME_cal * (1 + NAME_lin) * (1 + NAME_res) * (1 + NAME_stab)``.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pandas as pd

from ..coverage import DEFAULT_CERTIFICATE_PROBABILITY, describe_inference, dof_from_coverage_factor
from ..distributions import Distribution
from ..errors import BudgetError, DataError
from ..quantity import ModuleResult, Provenance, Quantity
from ..stats.regression import INFLATE_POLICIES, fit
from ..warnings import warn
from .column_units import ColumnUnit, column_unit, to_si
from .context import InputContext
from .corrections import assemble, relative_term
from .history import parse_when
from .tables import numeric_column, read_table, row_ranges

__all__ = ["KEYS", "evaluate"]

KEYS = frozenset({"file", "fit", "inflate", "consistency_level", "gain", "gain_is",
                  "gain_uncertainty", "gain_expanded_uncertainty", "gain_coverage_factor",
                  "gain_coverage_probability",
                  "gain_dof", "working_voltage_V", "linearity", "linearity_factor",
                  "resolution_V", "stability",
                  "stability_per_day", "calibration_date", "at"})

_CERT_KEYS = ("gain", "gain_is", "gain_uncertainty", "gain_expanded_uncertainty",
              "gain_coverage_factor", "gain_coverage_probability", "gain_dof")


def _from_table(ctx: InputContext, name: str) -> tuple[Quantity, tuple, dict]:
    """Fit the calibration table; return g, (reference voltages, residuals) in V, diagnostics."""
    for k in _CERT_KEYS:
        if k in ctx.table:
            raise ctx.spec_error(k, "give either a calibration table ('file') or certificate "
                                    "values ('gain' ...), not both")
    path = ctx.path_of(ctx.option("file", str), "file")
    shown = ctx.display(path)
    volt = ColumnUnit("V", "a voltage")
    rules = {"reference_V": volt, "reading_V": volt,
             "reading_uncertainty_V": ColumnUnit("V", "a voltage", difference=True)}
    df = read_table(path, ("reference_V", "reading_V"), ("reading_uncertainty_V",), shown=shown,
                    units=rules)
    ref = to_si(numeric_column(df, "reference_V", shown=shown), column_unit(df, "reference_V"))
    rd_unit = column_unit(df, "reading_V")
    rd = to_si(numeric_column(df, "reading_V", shown=shown), rd_unit)
    u = (to_si(numeric_column(df, "reading_uncertainty_V", shown=shown, positive=True),
               column_unit(df, "reading_uncertainty_V") or rd_unit, difference=True)
         if "reading_uncertainty_V" in df else None)
    mode = ctx.choice("fit", ("offset", "origin"), "offset")
    policy = ctx.choice("inflate", INFLATE_POLICIES, "chi2-test")
    level = ctx.option("consistency_level", float, 0.05, check=lambda a: 0 < a < 1,
                       must="between 0 and 1 (exclusive)")
    if mode == "offset" and np.unique(ref).size < 2:
        raise DataError("a fit with offset needs at least two different reference voltages",
                        file=shown, field="reference_V")
    try:
        f = fit(ref, rd, u, model="line" if mode == "offset" else "proportional", x0=0.0,
                inflate=policy, alpha=level)
    except BudgetError as exc:
        raise exc.located(file=shown) from None
    g_ratio = f.params[-1]  # slope G = reading / reference
    u_ratio = f.std_errors[-1]
    if not g_ratio > 0:
        raise DataError(f"the fitted gain reading/reference is {g_ratio:g}, not positive",
                        file=shown, field="reading_V")
    g = 1.0 / g_ratio
    u_g = u_ratio / g_ratio ** 2
    statistical = math.isfinite(f.dof)
    if statistical:
        dist = Distribution.student_t(g, u_g, f.dof)
        dist_reason = ("scaled and shifted Student t: the scale was estimated from the "
                       "residuals of the fit (JCGM 101 §6.4.9)")
        dof_reason = f"{f.nu} = n - p of the least-squares fit"
    else:
        dist = Distribution.normal(g, u_g)
        dist_reason = "normal: linear combination of readings with stated normal uncertainties"
        dof_reason = "infinite: stated reading uncertainties, scatter consistent with them"
    kind = "with offset" if mode == "offset" else "through the origin"
    notes = [] if not f.inflated else [f"residuals exceed the stated reading uncertainties: "
                                       f"{f.verdict}"]
    q = Quantity(
        name=name, value=g, standard_uncertainty=u_g, distribution=dist, unit="1", dof=f.dof,
        evaluation="A",  # statistical analysis of a series of readings (JCGM 100 4.2)
        description="voltmeter gain correction factor from its calibration against a Josephson "
                    "voltage standard",
        provenance=Provenance(
            origin="module:voltmeter",
            method=(f"least-squares line {kind} of {f.n} readings against the Josephson "
                    f"reference ({'weighted' if f.weighted else 'unweighted'}); g = 1/G with "
                    f"G the fitted slope, u(g) = u(G)/G²"),
            distribution_reason=dist_reason, dof_reason=dof_reason,
            files=(ctx.file_ref(path, row_ranges(range(1, len(df) + 1))),), notes=tuple(notes),
            warnings=tuple(warn("voltmeter.inflated", n + "; the covariance was scaled up")
                           for n in notes)))
    resid = np.asarray(f.residuals)
    diag = {"calibration": {"fit": f.to_dict(), "mode": mode, "ratio_G": g_ratio,
                            "u_ratio_G": u_ratio,
                            "max_abs_residual_V": float(np.max(np.abs(resid))),
                            "residual_sd_V": f.to_dict()["residual_sd"]},
            "figures": [_residual_figure(ctx, ref, resid)]}
    return q, (np.asarray(ref, dtype=float), resid), diag


def _near_working_voltage(ctx: InputContext, cal: tuple, v_w: float, diag: dict
                          ) -> tuple[float, str, tuple]:
    """max |residual| (V) of the points near V_w (``linearity``), how it was found, warnings."""
    factor = ctx.option("linearity_factor", float, 2.0, check=lambda x: x > 1, must="> 1")
    ref, resid = cal
    near = (np.abs(ref) >= v_w / factor) & (np.abs(ref) <= v_w * factor)
    diag["calibration"]["linearity_points"] = int(near.sum())
    if near.sum() >= 2:
        worst = float(np.max(np.abs(resid[near])))
        return worst, (f"max |residual| of the {int(near.sum())} calibration points with "
                       f"{v_w / factor:.4g} V ≤ |V_ref| ≤ {v_w * factor:.4g} V"), ()
    worst = float(np.max(np.abs(resid)))
    msg = (f"{int(near.sum())} calibration point(s) within a factor {factor:g} of the working "
           f"voltage {v_w:g} V (|V_ref| from {float(np.min(np.abs(ref))):.4g} to "
           f"{float(np.max(np.abs(ref))):.4g} V): the linearity is the largest residual of the "
           "whole table, which may not describe the nonlinearity at the working voltage")
    return worst, f"max |residual| of all {len(ref)} calibration points", (
        warn("voltmeter.linearity_range", msg),)


def _residual_figure(ctx: InputContext, ref: np.ndarray, resid: np.ndarray) -> dict:
    step = max(1, math.ceil(ref.size / 400))
    order = np.argsort(ref)[::step]
    return {"id": f"{ctx.name}-linearity", "title": "voltmeter calibration: residuals of the "
            "gain fit", "xlabel": "Josephson reference voltage (V)",
            "ylabel": "reading - fitted line (V)", "xscale": "linear", "yscale": "linear",
            "series": [{"label": "residuals", "style": "points",
                        "x": [float(ref[i]) for i in order],
                        "y": [float(resid[i]) for i in order]}]}


def _from_certificate(ctx: InputContext, name: str) -> tuple[Quantity, dict]:
    for k in ("fit", "inflate", "consistency_level"):
        if k in ctx.table:
            raise ctx.spec_error(k, "applies only to a calibration table ('file')")
    value = ctx.number("gain", positive=True)
    convention = ctx.choice("gain_is", ("correction", "reading-ratio"), "correction")
    if "gain_uncertainty" in ctx.table:
        for k in ("gain_expanded_uncertainty", "gain_coverage_factor"):
            if k in ctx.table:
                raise ctx.spec_error(k, "give either gain_uncertainty or "
                                        "gain_expanded_uncertainty with gain_coverage_factor")
        u = ctx.number("gain_uncertainty", nonnegative=True)
        how = "standard uncertainty from the certificate"
    else:
        big_u = ctx.number("gain_expanded_uncertainty", nonnegative=True)
        k = ctx.number("gain_coverage_factor", positive=True)
        u, how = big_u / k, f"u = U/k with U = {big_u:g}, k = {k:g} from the certificate"
    dof_reason = ""
    if "gain_coverage_probability" in ctx.table and "gain_coverage_factor" not in ctx.table:
        raise ctx.spec_error("gain_coverage_probability", "only goes with "
                                                          "gain_coverage_factor")
    if "gain_coverage_factor" in ctx.table:
        k = ctx.number("gain_coverage_factor", positive=True)
        if k < 1:
            raise ctx.spec_error("gain_coverage_factor", "must be at least 1 (a smaller k would "
                                                         f"make U smaller than u); got {k!r}")
    if "gain_dof" in ctx.table:
        if "gain_coverage_probability" in ctx.table:
            raise ctx.spec_error("gain_coverage_probability", "give gain_dof or "
                                 "gain_coverage_probability, not both (ν follows from k and p)")
        dof = ctx.number("gain_dof", positive=True)
    elif "gain_coverage_factor" in ctx.table:
        p = ctx.option("gain_coverage_probability", float, DEFAULT_CERTIFICATE_PROBABILITY,
                       check=lambda x: 0 < x < 1, must="in (0, 1)")
        try:
            dof = dof_from_coverage_factor(k, p)
        except BudgetError as exc:
            raise ctx.spec_error("gain_coverage_factor", exc.message) from None
        dof_reason = describe_inference(k, p, dof)
        if "gain_coverage_probability" not in ctx.table:
            dof_reason += f"; p = {100 * p:g} % assumed (no gain_coverage_probability given)"
    else:
        dof = math.inf
    if convention == "reading-ratio":
        g = 1.0 / value
        u_g = u * g * g      # u(G)/G², written so that a tiny G overflows instead of dividing by 0
        if not (math.isfinite(g) and math.isfinite(u_g)):
            raise ctx.spec_error("gain", f"1/G is not a finite number for G = {value!r}")
        how += "; g = 1/G, u(g) = u(G)/G²"
    else:
        g, u_g = value, u
    if math.isfinite(dof):
        dist = Distribution.student_t(g, u_g, dof)
        dist_reason = (f"scaled and shifted Student t with the certificate's {dof:g} degrees of "
                       "freedom (JCGM 101 §6.4.9)")
    else:
        dist = Distribution.normal(g, u_g)
        dist_reason = "normal: a certificate value with a standard uncertainty"
    q = Quantity(
        name=name, value=g, standard_uncertainty=u_g, distribution=dist, unit="1", dof=dof,
        evaluation="B",
        description="voltmeter gain correction factor from its calibration certificate",
        provenance=Provenance(origin="module:voltmeter", method=how,
                              distribution_reason=dist_reason,
                              dof_reason=dof_reason or (
                                  "stated on the certificate" if math.isfinite(dof)
                                  else "infinite: none stated on the certificate")))
    return q, {"calibration": {"certificate_value": value, "convention": convention,
                               "g": g, "u_g": u_g}}


def _days(ctx: InputContext) -> float:
    start = parse_when(ctx, "calibration_date")
    end = parse_when(ctx, "at")
    days = float((end - start) / pd.Timedelta(days=1))
    if days < 0:
        raise ctx.spec_error("at", f"is before calibration_date ({start.date().isoformat()})")
    return days


def evaluate(ctx: InputContext) -> ModuleResult:
    """Evaluate a ``voltmeter`` input (see the module docstring for the keys)."""
    if ("file" in ctx.table) == ("gain" in ctx.table):
        raise ctx.spec_error("file", "give exactly one of 'file' (calibration table) and "
                                     "'gain' (certificate value)")
    name_cal = f"{ctx.name}_cal"
    if "file" in ctx.table:
        main, cal, diagnostics = _from_table(ctx, name_cal)
    else:
        (main, diagnostics), cal = _from_certificate(ctx, name_cal), None
    terms: list[tuple[str, Quantity]] = []

    lin = ctx.option("linearity", (float, str), "from-fit" if cal is not None else None)
    if isinstance(lin, str):
        if lin != "from-fit":
            raise ctx.spec_error("linearity", f"must be a number or \"from-fit\"; got {lin!r}")
        if cal is None:
            raise ctx.spec_error("linearity", "\"from-fit\" needs a calibration table ('file')")
        v_w = ctx.number("working_voltage_V", positive=True)
        max_resid, which, lin_ws = _near_working_voltage(ctx, cal, v_w, diagnostics)
        q_lin = relative_term(
            ctx, name=f"{ctx.name}_lin", value=0.0, half_width=max_resid / v_w,
            description="voltmeter nonlinearity (from the calibration residuals)",
            method=(f"half-width = {which} / working voltage = {max_resid:.3g} V / "
                    f"{v_w:g} V"),
            reason=("the largest deviation from the fitted line near the working voltage is "
                    "taken as a bound on the nonlinearity error there, with no preferred value "
                    "inside it (JCGM 100 4.3.7)"),
            notes=("the residuals also contain the reading noise already in u(g): a "
                   "conservative double count",) + tuple(w.message for w in lin_ws))
        if lin_ws:
            q_lin = dataclasses.replace(q_lin, provenance=dataclasses.replace(
                q_lin.provenance, warnings=q_lin.provenance.warnings + lin_ws))
        terms.append(("lin", q_lin))
    elif lin is not None:
        if not lin >= 0:
            raise ctx.spec_error("linearity", f"must be >= 0; got {lin!r}")
        terms.append(("lin", relative_term(
            ctx, name=f"{ctx.name}_lin", value=0.0, half_width=lin,
            description="voltmeter nonlinearity (specification)",
            method=f"specified relative linearity ±{lin:g}",
            reason="a specification limit (JCGM 100 4.3.7)")))

    if "resolution_V" in ctx.table:
        res = ctx.number("resolution_V", positive=True)
        v_w = ctx.number("working_voltage_V", positive=True)
        terms.append(("res", relative_term(
            ctx, name=f"{ctx.name}_res", value=0.0, half_width=res / 2 / v_w,
            description="voltmeter resolution (half a digit)",
            method=f"half a digit of {res:g} V relative to the working voltage {v_w:g} V",
            reason="a rounding error of at most half a digit (JCGM 100 F.2.2.1)",
            notes=("bounds the rounding of a single reading; averaging many readings reduces "
                   "it, so this allowance is an upper one",))))

    if "stability" in ctx.table and "stability_per_day" in ctx.table:
        raise ctx.spec_error("stability_per_day", "give either 'stability' or "
                                                  "'stability_per_day', not both")
    if "stability" in ctx.table or "stability_per_day" in ctx.table:
        if "stability" in ctx.table:
            hw = ctx.number("stability", positive=True)
            how = f"stated relative bound ±{hw:g} since calibration"
            key = "stability"
        else:
            rate = ctx.number("stability_per_day", positive=True)
            days = _days(ctx)
            hw = rate * days
            how = f"±{rate:g} per day × {days:.1f} days since calibration"
            key = "stability_per_day"
        if hw >= 1:
            # the factor (1 + δ) with |δ| up to 1 or more reaches a gain of zero or below: no
            # voltmeter specification means that; most likely ppm were typed as a fraction
            raise ctx.spec_error(key, f"gives a relative bound of {hw:g}, at least 1 (a gain "
                                      "change of 100 % or more); give it as a fraction, e.g. "
                                      "2e-6 for 2 ppm")
        if hw > 0:
            terms.append(("stab", relative_term(
                ctx, name=f"{ctx.name}_stab", value=0.0, half_width=hw,
                description="voltmeter gain stability since calibration", method=how,
                reason="a specification bound on the change (JCGM 100 4.3.7)")))
    elif "calibration_date" in ctx.table or "at" in ctx.table:
        key = "calibration_date" if "calibration_date" in ctx.table else "at"
        raise ctx.spec_error(key, "is used only with stability_per_day")
    return assemble(ctx, main, terms, diagnostics)
