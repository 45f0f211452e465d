"""Least-squares fitting and parameter sampling shared by the pump models.

Invariants
----------
* Parameters are fitted with :func:`scipy.optimize.least_squares` (trust-region reflective)
  on residuals (model − data)/σ; the covariance is (JᵀJ)⁻¹ from the Jacobian at the solution,
  computed through its singular values so that an undetermined parameter is caught rather
  than inverted into nonsense.
* With ``n_std`` given the σ are taken as standard uncertainties; the covariance is scaled by
  the reduced χ² only when that exceeds 1 (the scatter is larger than stated). Without
  ``n_std`` every point has the same unknown σ and the covariance is scaled by s² = χ²/ν,
  as :func:`scipy.optimize.curve_fit` does with ``absolute_sigma=False``.
* The pump term is propagated by sampling θ ~ N(θ̂, Σ) with a :class:`numpy.random.Generator`
  seeded by a recorded seed: the same parameters, covariance, seed and sample count give
  bit-identical results, whether they come from raw data or from a fit-result file.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.optimize import least_squares

from ...errors import DataError

__all__ = ["FitResult", "Prediction", "fit_least_squares", "predict_delta", "sample_parameters",
           "DIFFER_FRACTION",
           "DEFAULT_SAMPLES", "DEFAULT_SEED"]

#: Linear and sampled standard uncertainties "differ" when their ratio is off 1 by more than this.
DIFFER_FRACTION = 0.05
DEFAULT_SAMPLES = 20_000
DEFAULT_SEED = 20100430


def _plain(x: float) -> float | None:
    x = float(x)
    return x if math.isfinite(x) else None


@dataclass(frozen=True)
class FitResult:
    """A fitted pump model: named parameters with covariance and the fit statistics.

    Parameters
    ----------
    model : str
        ``"decay-cascade"`` or ``"sequential-escape"``.
    settings : dict
        Model settings besides the parameters (steps, loaded, reference voltage ...).
    names, units : tuple of str
        Parameter names and units.
    values : tuple of float
        θ̂.
    covariance : tuple of tuple of float
        Σ, the (possibly scaled) covariance of θ̂, in the parameters' units.
    n_points : int
        Data points fitted.
    chi2 : float
        Σ ((model − data)/σ)² at θ̂ (σ = 1 when unweighted).
    dof : int
        n_points − number of parameters.
    weighted : bool
        True when ``n_std`` weights were used.
    scale : float
        Factor applied to (JᵀJ)⁻¹ (1, the reduced χ², or s²).
    scale_reason : str
        Why that factor.
    nfev : int
        Model evaluations used.
    residual_rms : float
        RMS of (data − model), in electrons, for stating the data's precision.
    """

    model: str
    settings: dict
    names: tuple[str, ...]
    units: tuple[str, ...]
    values: tuple[float, ...]
    covariance: tuple[tuple[float, ...], ...]
    n_points: int
    chi2: float
    dof: int
    weighted: bool
    scale: float
    scale_reason: str
    nfev: int = 0
    residual_rms: float = math.nan

    @property
    def theta(self) -> np.ndarray:
        return np.asarray(self.values, dtype=float)

    @property
    def cov(self) -> np.ndarray:
        return np.asarray(self.covariance, dtype=float)

    @property
    def std_errors(self) -> np.ndarray:
        return np.sqrt(np.clip(np.diag(self.cov), 0, None))

    @property
    def correlation(self) -> np.ndarray:
        se = self.std_errors
        with np.errstate(all="ignore"):
            r = self.cov / np.outer(se, se)
        return np.where(np.isfinite(r), r, 0.0)

    @property
    def reduced_chi2(self) -> float:
        return self.chi2 / self.dof if self.dof > 0 else math.nan

    def to_dict(self) -> dict[str, Any]:
        return {"model": self.model, "settings": dict(self.settings),
                "parameters": [{"name": n, "unit": u, "value": float(v), "std_error": float(s)}
                               for n, u, v, s in zip(self.names, self.units, self.values,
                                                     self.std_errors)],
                "covariance": [[float(x) for x in row] for row in self.covariance],
                "correlation": [[float(x) for x in row] for row in self.correlation],
                "n_points": self.n_points, "chi2": _plain(self.chi2), "dof": self.dof,
                "reduced_chi2": _plain(self.reduced_chi2), "weighted": self.weighted,
                "covariance_scale": _plain(self.scale), "scale_reason": self.scale_reason,
                "nfev": self.nfev, "residual_rms": _plain(self.residual_rms)}


def fit_least_squares(model: Any, predict: Callable[[np.ndarray], np.ndarray],
                      y: np.ndarray, sigma: np.ndarray | None, x0: np.ndarray, *,
                      jac: Callable[[np.ndarray], np.ndarray] | None = None,
                      max_evaluations: int = 2000, shown: str = "",
                      column: str = "n_mean") -> FitResult:
    """Fit ``predict(θ)`` to ``y`` and return the parameters with their covariance.

    Parameters
    ----------
    model : CascadeModel or EscapeModel
        Supplies ``name``, ``settings``, ``param_names`` and ``param_units``.
    predict : callable
        θ -> model values at the data points.
    y : ndarray
        Observed mean numbers (electrons per cycle).
    sigma : ndarray or None
        Their standard deviations (``n_std``), or None for an unweighted fit.
    x0 : ndarray
        Starting θ.
    jac : callable, optional
        θ -> ∂predict/∂θ; finite differences when omitted.
    max_evaluations : int
        Most model evaluations before the fit counts as not converged. Default 2000.
    shown, column : str
        Data file and column named in errors.

    Raises
    ------
    DataError
        The fit did not converge, or the data do not determine every parameter.
    """
    w = np.ones_like(y) if sigma is None else 1.0 / sigma
    p = len(x0)

    def resid(theta):
        r = (predict(theta) - y) * w
        return np.where(np.isfinite(r), r, 1e150)

    kwargs: dict[str, Any] = {}
    if jac is not None:
        kwargs["jac"] = lambda theta: jac(theta) * w[:, None]
    else:
        kwargs["jac"] = "3-point"
    try:
        res = least_squares(resid, x0, method="trf", x_scale="jac", ftol=1e-12, xtol=1e-12,
                            gtol=1e-12, max_nfev=max_evaluations, **kwargs)
    except ValueError as exc:  # e.g. a non-finite starting point
        raise DataError(f"the fit could not start: {exc}", file=shown, field=column) from None
    if res.status <= 0 or not np.all(np.isfinite(res.x)):
        raise DataError(f"the {model.name} fit did not converge within {max_evaluations} "
                        f"model evaluations ({res.message.rstrip('.')}); check the model, the "
                        "number of steps/electrons and the data", file=shown, field=column)
    J = res.jac
    _, s, vt = np.linalg.svd(J, full_matrices=False)
    if s.size < p or not np.all(np.isfinite(s)) or s[-1] <= s[0] * 1e-12 * max(J.shape):
        worst = int(np.argmax(np.abs(vt[-1]))) if s.size else 0
        raise DataError(f"the data do not determine the {model.name} parameter "
                        f"'{model.param_names[worst]}' (singular Jacobian at the solution); a "
                        "step or escape may lie outside the data or be unresolved",
                        file=shown, field=column)
    cov = (vt.T / s ** 2) @ vt
    chi2 = float(np.sum(res.fun ** 2))
    dof = len(y) - p
    red = chi2 / dof
    if sigma is None:
        scale = red
        reason = (f"unweighted fit (no n_std column): covariance scaled by the residual "
                  f"variance s² = {red:.3g} (ν = {dof})")
    elif red > 1:
        scale = red
        reason = (f"covariance scaled by the reduced χ² = {red:.3g} > 1: the scatter is larger "
                  "than the stated n_std")
    else:
        scale = 1.0
        reason = f"n_std taken as standard uncertainties; not scaled (reduced χ² = {red:.3g} ≤ 1)"
    cov = cov * scale
    cov = (cov + cov.T) / 2
    rms = float(np.sqrt(np.mean((predict(res.x) - y) ** 2)))
    return FitResult(model=model.name, settings=model.settings, names=model.param_names,
                     units=model.param_units, values=tuple(float(v) for v in res.x),
                     covariance=tuple(tuple(float(c) for c in row) for row in cov),
                     n_points=len(y), chi2=chi2, dof=dof, weighted=sigma is not None,
                     scale=float(scale), scale_reason=reason, nfev=int(res.nfev),
                     residual_rms=rms)


@dataclass(frozen=True)
class Prediction:
    """The pump term δ = ⟨n⟩/n − 1 at the operating point, propagated from θ̂ and Σ.

    Parameters
    ----------
    best : float
        δ at θ̂ (dimensionless).
    mean, std : float
        Mean and standard deviation of δ over the parameter samples: the estimate and standard
        uncertainty carried into the budget (JCGM 101 §7.6 reading of a propagated PDF).
    linear_std : float
        √(gᵀΣg) with g = ∂δ/∂θ at θ̂ (central differences): the GUM law of propagation.
    low_95, high_95, median : float
        2.5 %, 97.5 % and 50 % quantiles of the samples.
    skewness : float
        Sample skewness (0 for a symmetric distribution).
    samples, seed : int
        Number of parameter samples and the Generator seed.
    differs : bool
        True when linear_std/std is off 1 by more than :data:`DIFFER_FRACTION`.
    """

    best: float
    mean: float
    std: float
    linear_std: float
    low_95: float
    high_95: float
    median: float
    skewness: float
    samples: int
    seed: int
    differs: bool
    details: dict = field(default_factory=dict)
    draws: Any = field(default=None, repr=False, compare=False)   # the sampled δ (ndarray),
    #                                 for the budget row's sampled distribution

    def to_dict(self) -> dict[str, Any]:
        return {"delta_at_fit": self.best, "mean": self.mean, "standard_uncertainty": self.std,
                "linear_standard_uncertainty": self.linear_std, "interval_95": [self.low_95,
                                                                                self.high_95],
                "median": self.median, "skewness": _plain(self.skewness),
                "samples": self.samples, "seed": self.seed, "linear_and_sampled_differ":
                self.differs, **{k: v for k, v in self.details.items()}}


def sample_parameters(theta: np.ndarray, cov: np.ndarray, samples: int, seed: int
                      ) -> np.ndarray:
    """``samples`` rows θ̂ + A z with A Aᵀ = Σ (eigen-decomposition, rounding-level negative
    eigenvalues set to 0) and z standard normal from ``numpy.random.default_rng(seed)``."""
    w, vecs = np.linalg.eigh((np.asarray(cov, dtype=float) + np.asarray(cov, dtype=float).T) / 2)
    a = vecs * np.sqrt(np.clip(w, 0.0, None))
    z = np.random.default_rng(seed).standard_normal((int(samples), len(theta)))
    return np.asarray(theta, dtype=float) + z @ a.T


def predict_delta(model: Any, theta: np.ndarray, cov: np.ndarray, point: dict, plateau: int,
                  *, samples: int = DEFAULT_SAMPLES, seed: int = DEFAULT_SEED,
                  shown: str = "") -> Prediction:
    """δ = ⟨n⟩(point)/n − 1 with its sampled and linear standard uncertainties.

    Parameters
    ----------
    model : CascadeModel or EscapeModel
        Supplies ``deviation(θ_rows, point, plateau)`` = ⟨n⟩ − n.
    theta, cov : ndarray
        θ̂ and Σ.
    point : dict
        ``gate_voltage`` (V) and, for the escape model, ``hold_time`` (s).
    plateau : int
        n ≥ 1.
    samples, seed : int
        Parameter samples (default 20000) and Generator seed (default 20100430).
    """
    theta = np.asarray(theta, dtype=float)
    cov = np.asarray(cov, dtype=float)

    def delta(rows):
        return model.deviation(rows, point, plateau) / plateau

    best = float(delta(theta[None, :])[0])
    draws = sample_parameters(theta, cov, samples, seed)
    d = delta(draws)
    if not np.all(np.isfinite(d)):
        bad = int((~np.isfinite(d)).sum())
        raise DataError(f"{bad} of {samples} parameter samples give no finite pump error; the "
                        "parameter uncertainties are too large for a prediction", file=shown)
    # linear propagation: central differences scaled by each parameter's standard error
    se = np.sqrt(np.clip(np.diag(cov), 0, None))
    h = np.where(se > 0, se * 1e-3, 1e-8 * np.maximum(1.0, np.abs(theta)))
    steps = np.diag(h)
    g = (delta(theta + steps) - delta(theta - steps)) / (2 * h)
    lin = float(math.sqrt(max(float(g @ cov @ g), 0.0)))
    mean, std = float(np.mean(d)), float(np.std(d, ddof=1))
    lo, med, hi = (float(x) for x in np.quantile(d, [0.025, 0.5, 0.975]))
    skew = float(np.mean((d - mean) ** 3) / std ** 3) if std > 0 else 0.0
    differs = bool(std > 0 and abs(lin / std - 1) > DIFFER_FRACTION) or \
        bool(std == 0 and lin > 0)
    return Prediction(best=best, mean=mean, std=std, linear_std=lin, low_95=lo, high_95=hi,
                      median=med, skewness=skew, samples=int(samples), seed=int(seed),
                      differs=differs, draws=d)
