"""Input module ``resistor``: a reference resistor predicted from its calibration history.

The history (CSV, see :mod:`budget.inputs.history` for the columns) is fitted against time by
weighted least squares with u_i = U_i/k_i — a straight line (drift, the default) or a constant —
and the fitted line is evaluated at the measurement date with the uncertainty from the full
parameter covariance (JCGM 100 H.3). Optional corrections for the working temperature and the
working voltage become their own budget rows.

Spec keys (``[inputs.NAME]``, besides ``module = "resistor"``)
--------------------------------------------------------------
file : str
    Calibration history CSV (required). Columns: ``date``, ``value`` (Ω unless the header
    gives a resistance unit, ``value [GΩ]``), ``expanded_uncertainty`` (the value's unit unless
    its header gives one), ``coverage_factor``; optional ``temperature_C`` (°C), ``voltage_V``
    (V, or ``voltage_V [mV]``), ``certificate``. A header unit that is not a resistance, or
    that pint cannot read, is refused naming the file and column; the values are converted to
    Ω when read, and ``common_standard_uncertainty`` and ``nominal`` are in the header's unit.
at : str or TOML date-time
    When the pump was measured, ISO 8601 (required). Before the first calibration is refused;
    after the last one the prediction is an extrapolation and is flagged in the notes.
drift : {"linear", "constant"}
    Drift model. Default ``"linear"``.
inflate : {"chi2-test", "birge", "never"}
    What to do when the calibrations scatter more than their stated uncertainties.
    ``"chi2-test"`` (default): multiply the covariance by χ²/ν when the χ² test rejects
    consistency at ``consistency_level``; ``"birge"``: whenever the Birge ratio exceeds 1;
    ``"never"``: keep the stated uncertainties (the Birge ratio is still reported).
consistency_level : float
    Significance level of the χ² test. Default 0.05.
exclude_rows : list of int
    Data rows (1-based, header excluded) left out of the fit; listed in the notes. Default none.
nominal : float
    Nominal value (Ω) used only as the reference of the drift figure. Default: the prediction.
alpha, beta : float
    Temperature coefficients (1/K, 1/K²) of δ_T = α·ΔT + β·ΔT², ΔT = T − T_ref. Giving any
    temperature key adds the row ``NAME_temp``; ``alpha`` is then required, ``beta`` defaults to 0.
alpha_uncertainty, beta_uncertainty : float
    Standard uncertainties of α and β (1/K, 1/K²). Default 0.
reference_temperature_C : float
    T_ref (°C). Default: the mean of the ``temperature_C`` column; required without that column.
temperature_C : float
    Resistor temperature during the pump measurement (°C).
temperature_uncertainty_C, temperature_half_width_C : float
    Its standard uncertainty (normal) or the half-width of a bound (rectangular), K; one of them
    (or a coefficient uncertainty) is required with a temperature correction.
voltage_coefficient : float
    Relative change of R per volt, γ (1/V). Giving any voltage key adds the row ``NAME_volt``:
    δ_V = γ·(V_work − V_cal). Default 0 (an unknown coefficient bounded by the keys below).
voltage_coefficient_uncertainty, voltage_coefficient_bound : float
    Standard uncertainty of γ (normal) or half-width of a bound on it (rectangular), 1/V; one
    of them is required with a voltage correction.
calibration_voltage_V : float
    V_cal (V). Default: the mean of the ``voltage_V`` column; required without that column.
working_voltage_V : float
    Voltage across the resistor during the pump measurement, V_work (V); required with a
    voltage correction.
stability_bound : float
    Relative half-width of the change allowed since the last calibration that the drift line
    does not capture (transport to the laboratory, instability), e.g. 2e-8, as for the
    amplifier. Adds ``NAME_stab``: rectangular about 0.

Quantities
----------
Without corrections a single quantity NAME (Ω). With corrections ``NAME_cal`` (Ω, the drift
prediction), ``NAME_temp``, ``NAME_volt`` and/or ``NAME_stab`` (dimensionless) and the
expression ``NAME_cal * (1 + NAME_temp) * (1 + NAME_volt) * (1 + NAME_stab)``.

When the history has ``temperature_C`` or ``voltage_V`` values and the matching correction is
configured, each calibration value is first referred to T_ref and V_cal with the nominal
coefficients, so the fitted line is the resistance at reference conditions.
"""

from __future__ import annotations

import numpy as np

from ..numbers import overflow_checked
from ..quantity import ModuleResult, Quantity
from .context import InputContext
from .corrections import (
    TEMPERATURE_KEYS,
    bounded_or_standard,
    drift_result,
    reference_level,
    relative_term,
    stability_term,
    temperature_term,
)
from .history import HISTORY_KEYS, History, parse_when, read_history

__all__ = ["KEYS", "evaluate"]

VOLTAGE_KEYS = frozenset({"voltage_coefficient", "voltage_coefficient_uncertainty",
                          "voltage_coefficient_bound", "calibration_voltage_V",
                          "working_voltage_V"})

KEYS = HISTORY_KEYS | TEMPERATURE_KEYS | VOLTAGE_KEYS | frozenset({"stability_bound"})

UNIT = "Ω"


def voltage_term(ctx: InputContext, hist: History, name: str
                 ) -> tuple[Quantity | None, np.ndarray | None, dict]:
    """The relative voltage-coefficient correction δ_V = γ·(V_work − V_cal), when configured.

    Returns the row (or None), the per-calibration factors 1 + γ·(V_i − V_cal) (or None) and
    diagnostics.
    """
    if not any(k in ctx.table for k in VOLTAGE_KEYS):
        return None, None, {"voltage": "no voltage-coefficient correction requested"}
    gamma = ctx.number("voltage_coefficient", 0.0)
    u_g, hw_g = bounded_or_standard(ctx, "voltage_coefficient_uncertainty",
                                    "voltage_coefficient_bound",
                                    required_with="with a voltage correction")
    v_work = ctx.number("working_voltage_V")
    v_cal, v_from, dv_i = reference_level(ctx, "calibration_voltage_V", hist.voltage,
                                          what="voltage", column_name="voltage_V")
    # γ·(V_work − V_cal), its uncertainties and the per-calibration factors can overflow a
    # float for absurd inputs: a located error naming the voltage key, never an inf downstream
    dv, _ = overflow_checked(
        lambda: (v_work - v_cal, (gamma * (v_work - v_cal), abs(v_work - v_cal) * u_g,
                                  abs(v_work - v_cal) * hw_g)),
        "the voltage-coefficient correction γ·(V_work − V_cal)",
        lambda msg: ctx.spec_error("working_voltage_V", msg))
    notes = []
    factors = None
    if dv_i is not None:
        factors = overflow_checked(lambda: 1.0 + gamma * dv_i,
                                   "the voltage-coefficient factors 1 + γ·(V_i − V_cal)",
                                   lambda msg: ctx.spec_error("voltage_coefficient", msg))
        if gamma != 0:
            notes.append("history values referred to V_cal with the nominal voltage coefficient "
                         "before the fit")
    if hw_g > 0:
        reason = (f"the voltage coefficient is known only within ±{hw_g:g} /V, so δ_V lies "
                  f"within ±{abs(dv) * hw_g:.3g} (JCGM 100 4.3.7)")
    else:
        reason = "the voltage coefficient carries a stated standard uncertainty"
    q = relative_term(
        ctx, name=name, value=gamma * dv, u=abs(dv) * u_g, half_width=abs(dv) * hw_g,
        description="relative voltage-coefficient correction of the resistor",
        method=(f"δ_V = γ·(V_work − V_cal) with γ = {gamma:g} /V, V_work = {v_work:g} V, "
                f"V_cal = {v_cal:g} V ({v_from})"),
        reason=reason, notes=tuple(notes))
    diag = {"voltage": {"voltage_coefficient_per_V": gamma, "calibration_voltage_V": v_cal,
                        "working_voltage_V": v_work, "correction": gamma * dv,
                        "standard_uncertainty": q.standard_uncertainty,
                        "calibration_voltage_from": v_from}}
    return q, factors, diag


def evaluate(ctx: InputContext) -> ModuleResult:
    """Evaluate a ``resistor`` input (see the module docstring for the keys)."""
    at = parse_when(ctx, "at")
    hist = read_history(ctx, voltage=True, positive=True, what="resistance", si=UNIT)
    q_temp, f_temp, d_temp = temperature_term(ctx, name=f"{ctx.name}_temp", what="resistor",
                                              history_temperature=hist.temperature)
    q_volt, f_volt, d_volt = voltage_term(ctx, hist, f"{ctx.name}_volt")
    q_stab = stability_term(ctx, name=f"{ctx.name}_stab", what="resistor")
    stability = (None if q_stab is None else
                 {"relative_half_width": q_stab.distribution.half_width})
    return drift_result(ctx, hist, at, [("temp", q_temp, f_temp, d_temp),
                                        ("volt", q_volt, f_volt, d_volt),
                                        ("stab", q_stab, None, {})], unit=UNIT,
                        what="resistance at reference conditions" if (q_temp or q_volt)
                        else "resistance", figure_what="reference resistor",
                        extra_diagnostics={"stability": stability})
