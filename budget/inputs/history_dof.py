"""Degrees of freedom of a calibration history from its coverage factors (see
:mod:`budget.inputs.history`, "Degrees of freedom from the coverage factors").

Each row's ν_i solves t_p(ν_i) = k_i (:func:`budget.coverage.dof_from_coverage_factor`,
JCGM 100 G.4–G.6, Table G.2) at the row's coverage probability (the file's
``coverage_probability`` column, else the spec key, default 0.95); the prediction
ŷ = Σ a_i y_i of a fit that keeps the stated uncertainties then has the Welch–Satterthwaite ν
(JCGM 100 G.2b) over its independent parts w_i = a_i²(u_i² − u_c²).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from ..coverage import DEFAULT_CERTIFICATE_PROBABILITY, dof_from_coverage_factor
from ..errors import BudgetError, DataError
from ..stats.regression import Fit
from .context import InputContext
from .tables import numeric_column

__all__ = ["row_dofs", "dof_from_certificates"]


def row_dofs(ctx: InputContext, df: pd.DataFrame, k: np.ndarray, shown: str
             ) -> tuple[np.ndarray, np.ndarray, float, bool]:
    """ν_i of every row of ``df`` from its coverage factor ``k``.

    Returns
    -------
    dof, probs : ndarray
        ν_i (``inf`` where k is the normal quantile) and the p each row's k is stated for.
    p : float
        The spec's ``coverage_probability`` (default 0.95).
    stated : bool
        Whether p was given (spec key or file column) rather than assumed.
    """
    p_key = "coverage_probability"
    p = ctx.option(p_key, float, DEFAULT_CERTIFICATE_PROBABILITY, check=lambda x: 0 < x < 1,
                   must="between 0 and 1 (exclusive), e.g. 0.95")
    probs = np.full(k.size, p)
    if p_key in df:
        col = numeric_column(df, p_key, shown=shown, allow_blank=True)
        bad = np.flatnonzero(~((col > 0) & (col < 1)) & np.isfinite(col))
        if bad.size:
            i = int(bad[0])
            raise DataError(f"must lie in (0, 1), e.g. 0.95; got {df[p_key].iloc[i]!r}",
                            file=shown, row=i + 1, field=p_key)
        probs = np.where(np.isfinite(col), col, p)
    nu_of_k: dict[tuple[float, float], float] = {}
    dof = np.empty(k.size)
    for i, (ki, pi) in enumerate(zip(k, probs)):
        if (ki, pi) not in nu_of_k:
            try:
                nu_of_k[ki, pi] = dof_from_coverage_factor(float(ki), float(pi))
            except BudgetError as exc:
                where = (f"coverage_probability = {pi:g}" if p_key in df else
                         f"coverage_probability = {pi:g}, spec {ctx.spec_file}, "
                         f"[inputs.{ctx.name}]; or give a coverage_probability column")
                raise DataError(f"{exc.message} ({where})", file=shown, row=i + 1,
                                field="coverage_factor") from None
        dof[i] = nu_of_k[ki, pi]
    return dof, probs, p, p_key in ctx.table or p_key in df


def dof_from_certificates(f: Fit, days: np.ndarray, hist, uc: float,
                           share: np.ndarray | None) -> tuple[float, str]:
    """ν of the prediction from the rows' ν_i (module docstring): Welch–Satterthwaite over the
    independent parts w_i = a_i²(u_i² − u_c²) of the prediction ŷ = Σ a_i y_i. (∞, "") when
    every ν_i is infinite or the rows carry no stated uncertainties."""
    if hist.dof is None or hist.u is None or not np.isfinite(hist.dof).any():
        return math.inf, ""
    design = (np.column_stack([np.ones(days.size), days]) if f.model == "line"
              else np.ones((days.size, 1)))
    v_obs = (np.diag(hist.u ** 2) if share is None
             else np.diag(hist.u ** 2 - uc ** 2) + uc ** 2 * share)
    a = (f.covariance @ np.linalg.solve(v_obs, design).T)[0]
    w = a ** 2 * (hist.u ** 2 - uc ** 2)
    finite = np.isfinite(hist.dof)
    denom = float(np.sum(w[finite] ** 2 / hist.dof[finite]))
    total = float(np.sum(w))
    if denom <= 0 or total <= 0:
        return math.inf, ""
    nu = total ** 2 / denom
    probs = (hist.probabilities if hist.probabilities is not None
             else np.full(hist.k.size, hist.coverage_probability))
    pairs = sorted(set((float(x), float(q), float(v)) for x, q, v in zip(hist.k, probs,
                                                                          hist.dof)))
    shown = "; ".join(f"k = {x:g} at {100 * q:g} % → ν_i = "
                      + ("∞" if math.isinf(v) else f"{v:.1f}") for x, q, v in pairs[:4])
    shown += "; ..." if len(pairs) > 4 else ""
    pct = f"{100 * hist.coverage_probability:g} %"
    reason = (f"ν = {nu:.1f} by Welch–Satterthwaite (JCGM 100 G.2b) over the calibrations' "
              f"parts of the prediction, each ν_i inferred from its k_i ({shown}; "
              "t_p(ν_i) = k_i, JCGM 100 G.4–G.6, Table G.2)")
    if not hist.probability_stated:
        reason += f"; p = {pct} assumed (no coverage_probability given)"
    return nu, reason
