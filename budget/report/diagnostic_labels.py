"""Module diagnostics as the report shows them: labelled rows with units, GUM rounding.

A diagnostics key (``mean_difference``, ``fit.birge_ratio``, ``max_abs_residual_V``) becomes a
label in words with its unit (``mean difference (V)``, ``fit: Birge ratio``, ``largest
|residual| (V)``); a value whose uncertainty sits beside it is rounded to the place of that
uncertainty's second significant digit, an uncertainty to two significant digits (JCGM 100
§7.2.6), any other number to six significant digits; None, True and False read "not
computed", "yes" and "no". The record keeps every digit; ``budget explain --full`` shows them.
"""

from __future__ import annotations

from typing import Any

from ..fmt import fmt_rows, fmt_u, plain, with_u
from .text import sci

__all__ = ["label_of", "diagnostic_table"]

#: Keys whose words are not just the key with spaces (module-independent where possible).
_WORDS = {
    "u": "standard uncertainty", "dof": "degrees of freedom ν", "nu": "degrees of freedom ν",
    "n": "number of points", "n_eff": "effective number of points",
    "birge_ratio": "Birge ratio", "chi2": "χ²", "reduced_chi2": "reduced χ²",
    "p_value": "p-value", "params": "fitted parameters", "std_errors": "their standard errors",
    "cov": "covariance", "x0": "origin of x", "adev": "Allan deviation",
    "u_naive": "standard uncertainty, independent cycles assumed",
    "u_white": "standard uncertainty, white noise (exact correlation of neighbours)",
    "u_autocorrelation": "standard uncertainty from the autocorrelation",
    "white_over_naive": "ratio white / independent", "lag1_autocorrelation":
    "lag-1 autocorrelation", "lag1_autocorrelation_white_model":
    "lag-1 autocorrelation expected for white noise", "noise_density": "noise density",
    "max_abs_residual": "largest |residual|", "residual_sd": "standard deviation of residuals",
    "ratio_G": "gain ratio G", "u_ratio_G": "standard uncertainty of G",
    "kept_fraction": "fraction of the record used", "time_used": "time used",
    "cycle_period": "cycle period", "cycles_used": "cycles used",
    "cycles_rejected": "cycles rejected", "predicted_value": "predicted value",
    "drift_per_year": "drift per year", "edf": "equivalent degrees of freedom",
    "predicted_dof": "degrees of freedom ν of the prediction",
    "drift_per_year_uncertainty": "standard uncertainty of the drift per year",
    "relative_drift_per_year": "relative drift per year",
    "floor_adev": "flicker floor (Allan deviation)", "floor_avar": "flicker floor (Allan "
    "variance)", "white_scale_S2": "white-noise scale S²", "sigma_mad": "σ_MAD",
}
#: key suffix -> unit shown in the label
_SUFFIX_UNITS = (("_per_V", "/V"), ("_per_K2", "/K²"), ("_per_K", "/K"), ("_per_year", "/a"),
                 ("_ppm", "10⁻⁶"), ("_V", "V"), ("_s", "s"), ("_h", "h"), ("_K", "K"),
                 ("_C", "°C"), ("_days", "d"), ("_Hz", "Hz"), ("_A", "A"), ("_ohm", "Ω"))
#: keys in the module's own unit (``diagnostics["unit"]``)
_IN_MODULE_UNIT = {"mean_difference", "standard_deviation", "u", "u_naive", "u_white",
                   "u_autocorrelation", "predicted_value", "predicted_standard_uncertainty",
                   "predicted_standard_uncertainty_independent", "common_standard_uncertainty",
                   "predicted_standard_uncertainty_common", "median", "sigma_mad"}
_U_OF = {"correction": "standard_uncertainty", "value": "standard_uncertainty",
         "predicted_value": "predicted_standard_uncertainty", "mean_difference": "u",
         "ratio_G": "u_ratio_G", "drift_per_year": "drift_per_year_uncertainty"}


def _is_uncertainty(key: str) -> bool:
    return (key.startswith("u_") or key in ("u", "standard_uncertainty", "std_errors")
            or "standard_uncertainty" in key or key.endswith(("_uncertainty", "_sd"))
            or key.startswith(("residual_sd", "standard_deviation")))


def label_of(key: str, unit: str = "") -> str:
    """``max_abs_residual_V`` → ``largest |residual| (V)``; ``unit`` is the module's unit
    for the keys measured in it."""
    base, shown_unit = key, ""
    for suffix, u in _SUFFIX_UNITS:
        if key.endswith(suffix) and len(key) > len(suffix):
            base, shown_unit = key[: -len(suffix)], u
            break
    words = _WORDS.get(key) or _WORDS.get(base) or base.replace("_", " ")
    if not shown_unit and key in _IN_MODULE_UNIT and unit not in ("", "1"):
        shown_unit = unit
    if key.startswith("drift_per_year") and unit not in ("", "1"):
        words, shown_unit = _WORDS.get(key, "drift per year"), f"{unit}/a"
    return f"{words} ({shown_unit})" if shown_unit else words


def _value(d: dict[str, Any], key: str, v: Any) -> str:
    if isinstance(v, bool) or v is None or isinstance(v, str):
        return fmt_rows(v) if isinstance(v, str) and "rows" in key else plain(v)
    if isinstance(v, int):
        return str(v)
    if _is_uncertainty(key):
        return sci(fmt_u(float(v)))
    u = d.get(_U_OF.get(key, f"u_{key}"))
    if isinstance(u, (int, float)) and not isinstance(u, bool):
        return sci(with_u(float(v), float(u)))
    return sci(f"{float(v):.6g}")


def diagnostic_table(diag: dict[str, Any], limit: int = 40) -> list[tuple[str, str]]:
    """(label, value) rows of a module's scalar diagnostics, one level of nesting shown as
    ``fit: Birge ratio``; the nested tables only when the top level is thin (they repeat it).
    Lists, figures and the module's ``unit`` key are left out (the record has them)."""
    unit = diag.get("unit") if isinstance(diag.get("unit"), str) else ""
    rows: list[tuple[str, str]] = []
    nested: list[tuple[str, str]] = []
    for k, v in diag.items():
        if k in ("figures", "unit") or k.endswith("_unit"):
            continue
        if isinstance(v, (bool, int, float, str)) or v is None:
            rows.append((label_of(k, unit), _value(diag, k, v)))
        elif isinstance(v, dict):
            inner_unit = v.get("unit") if isinstance(v.get("unit"), str) else unit
            for k2, v2 in v.items():
                if k2 == "unit":
                    continue
                if isinstance(v2, (bool, int, float, str)) or v2 is None:
                    nested.append((f"{label_of(k, '')}: {label_of(k2, inner_unit)}",
                                   _value(v, k2, v2)))
    if len(rows) < 8:
        rows += nested
    return rows[:limit]
