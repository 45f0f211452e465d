"""Thermal-activation check: which escape regime do rates measured at several temperatures favour?

For escape over a barrier lowered linearly by the gate, Γ ∝ exp(α e V/(k_B T)), so the slope
s_T = d ln Γ/dV = α e/(k_B T) falls as 1/T and gives the lever arm α (dimensionless). For
tunnelling through the barrier the slope barely depends on T.

Data file (CSV, ``#`` lines are comments)
-----------------------------------------
``temperature_k`` (K, > 0), ``gate_voltage`` (V), ``escape_rate`` (1/s, > 0), optional
``escape_rate_std`` (1/s, > 0). Rows with the same temperature form one group; each group needs
at least two gate voltages (three when ``escape_rate_std`` is absent, so that its scatter gives
the slope's uncertainty).

Statistic
---------
Per temperature a straight-line fit of ln Γ against V gives s_T ± u(s_T). Two one-parameter
models are fitted to the slopes by weighted least squares: thermal s_T = c/T and tunnelling
s_T = s_0. With the same number of parameters, Δχ² = χ²_tunnel − χ²_thermal is twice the log
likelihood ratio; Δχ² ≥ :data:`DECISIVE` (likelihood ratio ≥ e² ≈ 7.4) with the favoured model
itself acceptable (χ² p-value ≥ :data:`P_ACCEPT`) decides the verdict. A free exponent γ of
s_T ∝ T^(−γ) is reported as well (γ ≈ 1 thermal, γ ≈ 0 tunnelling).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from scipy import constants, stats

from ...errors import DataError
from ..tables import numeric_column, read_table, row_ranges

__all__ = ["ThermalCheck", "read_thermal", "thermal_check", "DECISIVE", "P_ACCEPT"]

DECISIVE = 4.0
P_ACCEPT = 0.01
_E_OVER_KB = constants.e / constants.k  # K/V, exact in the 2019 SI


@dataclass(frozen=True)
class ThermalCheck:
    """Slopes of ln Γ against gate voltage per temperature and the regime verdict.

    Parameters
    ----------
    temperatures : tuple of float
        K.
    slopes, slope_uncertainties : tuple of float
        s_T and u(s_T), 1/V.
    chi2_thermal, chi2_tunnel : float
        χ² of s_T = c/T and of s_T = s_0 (ν = groups − 1 each).
    delta_chi2 : float
        χ²_tunnel − χ²_thermal (> 0 favours thermal activation).
    p_thermal, p_tunnel : float
        χ² p-values of each model.
    exponent, exponent_uncertainty : float
        γ of s ∝ T^(−γ) (NaN when the slopes change sign).
    lever_arm, lever_arm_uncertainty : float
        α = c·k_B/e (meaningful when the verdict is thermal activation).
    verdict : str
        ``"thermal activation"``, ``"tunnelling"``, ``"neither"`` or ``"undecided"``.
    reason : str
        One sentence stating the statistic behind the verdict.
    file : str
        Data file, for the record.
    rows : str
        Rows used.
    """

    temperatures: tuple[float, ...]
    slopes: tuple[float, ...]
    slope_uncertainties: tuple[float, ...]
    chi2_thermal: float
    chi2_tunnel: float
    delta_chi2: float
    p_thermal: float
    p_tunnel: float
    exponent: float
    exponent_uncertainty: float
    lever_arm: float
    lever_arm_uncertainty: float
    verdict: str
    reason: str
    file: str = ""
    rows: str = ""

    def to_dict(self) -> dict[str, Any]:
        def f(x):
            return float(x) if math.isfinite(x) else None
        return {"temperatures_k": list(self.temperatures), "slopes_per_v": list(self.slopes),
                "slope_uncertainties_per_v": list(self.slope_uncertainties),
                "chi2_thermal": f(self.chi2_thermal), "chi2_tunnel": f(self.chi2_tunnel),
                "delta_chi2": f(self.delta_chi2), "p_thermal": f(self.p_thermal),
                "p_tunnel": f(self.p_tunnel), "exponent": f(self.exponent),
                "exponent_uncertainty": f(self.exponent_uncertainty),
                "lever_arm": f(self.lever_arm), "lever_arm_uncertainty":
                f(self.lever_arm_uncertainty), "verdict": self.verdict, "reason": self.reason,
                "file": self.file, "rows": self.rows}


def read_thermal(path: Path, *, shown: str | None = None) -> ThermalCheck:
    """Read a temperature-series CSV (see module docstring) and run :func:`thermal_check`."""
    shown = shown or str(path)
    df = read_table(path, ["temperature_k", "gate_voltage", "escape_rate"],
                    ["escape_rate_std"], shown=shown, min_rows=4)
    T = numeric_column(df, "temperature_k", shown=shown, positive=True)
    V = numeric_column(df, "gate_voltage", shown=shown)
    G = numeric_column(df, "escape_rate", shown=shown, positive=True)
    U = None
    if "escape_rate_std" in df.columns:
        U = numeric_column(df, "escape_rate_std", shown=shown, positive=True)
    return thermal_check(T, V, G, U, shown=shown)


def _line(v: np.ndarray, y: np.ndarray, u: np.ndarray | None) -> tuple[float, float]:
    """Slope of y against v and its standard uncertainty (weighted when u is given)."""
    w = np.ones_like(y) if u is None else 1 / u ** 2
    vm = np.sum(w * v) / np.sum(w)
    sxx = np.sum(w * (v - vm) ** 2)
    slope = float(np.sum(w * (v - vm) * y) / sxx)
    resid = y - (np.sum(w * y) / np.sum(w) + slope * (v - vm))
    if u is None:
        s2 = float(np.sum(resid ** 2) / (len(y) - 2))
        return slope, math.sqrt(s2 / sxx)
    red = float(np.sum(w * resid ** 2) / (len(y) - 2)) if len(y) > 2 else 1.0
    return slope, math.sqrt(max(red, 1.0) / sxx)


def thermal_check(T, V, G, U=None, *, shown: str = "") -> ThermalCheck:
    """Compare thermal activation with tunnelling on escape rates Γ(V) at several temperatures.

    Parameters
    ----------
    T, V, G : array_like
        Temperature (K), gate voltage (V) and escape rate (1/s) of each row.
    U : array_like, optional
        Standard deviation of each rate (1/s); u(ln Γ) = U/Γ.
    shown : str
        File name for errors.
    """
    T, V, G = (np.asarray(x, dtype=float) for x in (T, V, G))
    U = None if U is None else np.asarray(U, dtype=float)
    temps = np.unique(T)
    if temps.size < 2:
        raise DataError(f"the thermal-activation check needs rates at two or more temperatures; "
                        f"got {temps.size}", file=shown, field="temperature_k")
    need = 2 if U is not None else 3
    slopes, us = [], []
    for temp in temps:
        sel = np.flatnonzero(T == temp)
        if np.unique(V[sel]).size < need:
            raise DataError(f"temperature {temp:g} K has {np.unique(V[sel]).size} distinct gate "
                            f"voltages; at least {need} needed for a slope (rows "
                            f"{row_ranges(sel + 1)})", file=shown, row=int(sel[0]) + 1,
                            field="gate_voltage")
        s, u = _line(V[sel], np.log(G[sel]), None if U is None else U[sel] / G[sel])
        if not (u > 0 and math.isfinite(u)):
            raise DataError(f"the slope at {temp:g} K has no usable uncertainty (the points lie "
                            "exactly on a line); give escape_rate_std", file=shown,
                            row=int(sel[0]) + 1, field="escape_rate")
        slopes.append(s)
        us.append(u)
    s, u = np.asarray(slopes), np.asarray(us)
    w = 1 / u ** 2
    nu = len(s) - 1
    c = float(np.sum(w * s / temps) / np.sum(w / temps ** 2))       # s = c/T
    u_c = float(1 / math.sqrt(np.sum(w / temps ** 2)))
    chi_th = float(np.sum(w * (s - c / temps) ** 2))
    s0 = float(np.sum(w * s) / np.sum(w))                              # s = s_0
    chi_tu = float(np.sum(w * (s - s0) ** 2))
    p_th, p_tu = float(stats.chi2.sf(chi_th, nu)), float(stats.chi2.sf(chi_tu, nu))
    gamma = u_gamma = math.nan
    if np.all(s > 0) or np.all(s < 0):
        g_slope, g_u = _line(np.log(temps), np.log(np.abs(s)), u / np.abs(s))
        gamma, u_gamma = -g_slope, g_u
    dchi = chi_tu - chi_th
    if dchi >= DECISIVE and p_th >= P_ACCEPT:
        verdict = "thermal activation"
    elif dchi <= -DECISIVE and p_tu >= P_ACCEPT:
        verdict = "tunnelling"
    elif p_th < P_ACCEPT and p_tu < P_ACCEPT:
        verdict = "neither"
    else:
        verdict = "undecided"
    reason = (f"Δχ² = χ²(tunnelling) − χ²(thermal) = {dchi:.3g} over {len(s)} temperatures "
              f"(p = {p_th:.3g} thermal, {p_tu:.3g} tunnelling); decisive when |Δχ²| ≥ "
              f"{DECISIVE:g} and the favoured model has p ≥ {P_ACCEPT:g}")
    if math.isfinite(gamma):
        reason += f"; slope ∝ T^(−γ) with γ = {gamma:.3g} ± {u_gamma:.2g}"
    alpha = c / _E_OVER_KB
    return ThermalCheck(temperatures=tuple(float(x) for x in temps),
                        slopes=tuple(float(x) for x in s),
                        slope_uncertainties=tuple(float(x) for x in u), chi2_thermal=chi_th,
                        chi2_tunnel=chi_tu, delta_chi2=dchi, p_thermal=p_th, p_tunnel=p_tu,
                        exponent=gamma, exponent_uncertainty=u_gamma, lever_arm=float(alpha),
                        lever_arm_uncertainty=float(u_c / _E_OVER_KB), verdict=verdict,
                        reason=reason, file=shown, rows=row_ranges(range(1, len(T) + 1)))
