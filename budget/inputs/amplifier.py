"""Input module ``amplifier``: a calibrated current amplifier's transresistance (or gain).

The calibration history has the same columns as the resistor's (see
:mod:`budget.inputs.history`; a ``voltage_V`` column is accepted and not used), with ``value`` the transresistance (Ω = V/A) or the dimensionless
gain, and is fitted and predicted at the measurement date in the same way (JCGM 100 H.3 mathematics,
shared code). Optional terms, each its own budget row: temperature coefficient, a stability bound
between calibrations, and the residual input offset current.

Spec keys (``[inputs.NAME]``, besides ``module = "amplifier"``)
---------------------------------------------------------------
file, at, drift, inflate, consistency_level, exclude_rows, nominal
    As for the ``resistor`` module: history file (required), measurement date (required),
    ``"linear"`` (default) or ``"constant"`` drift, inflation policy (default ``"chi2-test"``)
    and its level (default 0.05), rows left out, figure reference value.
quantity : {"transresistance", "gain"}
    What the history holds. Default ``"transresistance"``.
unit : str
    Unit the history's ``value`` and ``expanded_uncertainty`` (and the keys
    ``common_standard_uncertainty``, ``nominal``) are stated in, when the CSV header does not
    say (``value [MΩ]``); converted to coherent SI when read. It must be a resistance (``"MΩ"``,
    ``"V/nA"``) for a transresistance and dimensionless (``"1"``, ``"V/mV"``) for a gain;
    another dimension is refused. Default coherent SI: ``"Ω"`` (= V/A) or ``"1"``. The
    quantity is always in coherent SI.
alpha, beta, alpha_uncertainty, beta_uncertainty, reference_temperature_C, temperature_C,
temperature_uncertainty_C, temperature_half_width_C
    Temperature coefficient of the transresistance, as for the resistor: adds ``NAME_temp``.
stability_bound : float
    Relative half-width of the change allowed between calibrations (transport, instability not
    captured by the drift line), e.g. 3e-7. Adds ``NAME_stab``: rectangular about 0.
offset_current_A : float
    Estimate of the residual input offset current that the on/off subtraction does not remove
    (A). Default 0.
offset_current_uncertainty_A, offset_current_bound_A : float
    Its standard uncertainty (normal) or the half-width of a bound (rectangular), A. Giving any
    offset key adds ``NAME_offset`` = I_os / I_signal.
signal_current_A : float
    The current being measured (A, e.g. n·e·f); required with an offset term, since the offset
    matters relative to it.

Quantities
----------
A single quantity NAME without extra terms; otherwise ``NAME_cal`` (the drift prediction, in
``unit``), the relative terms, and the expression
``NAME_cal * (1 + NAME_temp) * (1 + NAME_stab) * (1 + NAME_offset)``. The offset enters as a
factor because the output is A·(I + I_os) = A·(1 + I_os/I)·I, so the effective transresistance
seen by the current I is A·(1 + δ_os).
"""

from __future__ import annotations

from ..quantity import ModuleResult, Quantity
from ..units import Unit, UnitError, dim_text, parse_unit
from .context import InputContext
from .corrections import (
    TEMPERATURE_KEYS,
    bounded_or_standard,
    drift_result,
    relative_term,
    stability_term,
    temperature_term,
)
from .history import HISTORY_KEYS, parse_when, read_history

__all__ = ["KEYS", "evaluate"]

OFFSET_KEYS = frozenset({"offset_current_A", "offset_current_uncertainty_A",
                         "offset_current_bound_A", "signal_current_A"})
KEYS = (HISTORY_KEYS | TEMPERATURE_KEYS | OFFSET_KEYS
        | frozenset({"quantity", "unit", "stability_bound"}))


def _stability(ctx: InputContext, name: str) -> Quantity | None:
    return stability_term(ctx, name=name, what="amplifier")


def _offset(ctx: InputContext, name: str) -> tuple[Quantity | None, dict]:
    if not any(k in ctx.table for k in OFFSET_KEYS):
        return None, {"offset": "no input-offset term requested"}
    i_os = ctx.number("offset_current_A", 0.0)
    u_os, hw_os = bounded_or_standard(ctx, "offset_current_uncertainty_A",
                                      "offset_current_bound_A",
                                      required_with="with an offset term", name_bound=True)
    i_sig = ctx.number("signal_current_A", positive=True)
    reason = ("the residual offset is known only within a bound (JCGM 100 4.3.7)" if hw_os > 0
              else "the residual offset carries a stated standard uncertainty")
    q = relative_term(
        ctx, name=name, value=i_os / i_sig, u=u_os / i_sig, half_width=hw_os / i_sig,
        description="residual input offset current relative to the signal current",
        method=(f"δ_os = I_os / I_signal with I_os = {i_os:g} A "
                f"({'±' + format(hw_os, 'g') + ' A bound' if hw_os > 0 else f'u = {u_os:g} A'})"
                f" and I_signal = {i_sig:g} A"),
        reason=reason)
    return q, {"offset": {"offset_current_A": i_os, "signal_current_A": i_sig,
                          "relative_offset": q.value,
                          "standard_uncertainty": q.standard_uncertainty}}


def _stated_unit(ctx: InputContext, si: str, kind: str) -> Unit | None:
    """The ``unit`` key parsed, of the dimension ``kind`` needs (None when absent or SI)."""
    if "unit" not in ctx.table:
        return None
    text = ctx.option("unit", str)
    try:
        unit = parse_unit(text)
    except UnitError as exc:
        raise ctx.spec_error("unit", str(exc)) from None
    need = parse_unit(si)
    if unit.dims != need.dims:
        raise ctx.spec_error("unit", f"{text!r} is {dim_text(unit.dims)} but a {kind} is "
                                     f"{dim_text(need.dims)}")
    return None if unit.scale == 1.0 else unit


def evaluate(ctx: InputContext) -> ModuleResult:
    """Evaluate an ``amplifier`` input (see the module docstring for the keys)."""
    kind = ctx.choice("quantity", ("transresistance", "gain"), "transresistance")
    si = "Ω" if kind == "transresistance" else "1"
    stated = _stated_unit(ctx, si, kind)
    what = f"amplifier {kind}"
    at = parse_when(ctx, "at")
    hist = read_history(ctx, voltage=True, positive=kind == "transresistance",
                        what=kind, si=si, stated=stated)
    unit = si
    q_temp, f_temp, d_temp = temperature_term(ctx, name=f"{ctx.name}_temp", what=what,
                                              history_temperature=hist.temperature)
    q_stab = _stability(ctx, f"{ctx.name}_stab")
    q_off, d_off = _offset(ctx, f"{ctx.name}_offset")
    extra = ()
    if hist.voltage is not None:
        extra = ("the history's voltage_V column is not used by the amplifier module",)
    stability = (None if q_stab is None else
                 {"relative_half_width": q_stab.distribution.half_width})
    return drift_result(ctx, hist, at, [("temp", q_temp, f_temp, d_temp),
                                        ("stab", q_stab, None, {}),
                                        ("offset", q_off, None, d_off)],
                        unit=unit, what=what, figure_what=what, extra_notes=extra,
                        extra_diagnostics={"stability": stability})
