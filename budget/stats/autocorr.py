"""Sample autocorrelation and the effective number of independent observations.

For n observations x_i with mean x̄ and sample variance s², the variance of the mean of a
stationary series with autocorrelation ρ_k is (Zhang, Metrologia 43, S276, 2006; Witt,
Metrologia 44, 201, 2007)

    u²(x̄) = (s²/n)·[1 + 2·Σ_{k=1}^{n−1} (1 − k/n)·ρ_k],   n_eff = n / [1 + 2·Σ (1 − k/n)·ρ_k].

The sample autocorrelation is the usual biased estimator
r_k = Σ_{i<n−k} (x_i − x̄)(x_{i+k} − x̄) / Σ (x_i − x̄)²  (computed by FFT, O(n log n)).

Truncation rule
---------------
The sum over all n − 1 lags of *estimated* r_k is useless: the estimates at long lags are pure
noise, and with the mean subtracted the plain sum Σ_{k=1}^{n−1} r_k is exactly −1/2, so the
full sum drives the factor towards zero (n_eff towards infinity) whatever the noise. The sum is therefore truncated at the **initial positive
sequence**: k runs from 1 while r_k > 0 and stops before the first r_k ≤ 0, and never beyond
``max_lag`` (default ⌊n/4⌋, beyond which fewer than 3n/4 pairs enter an estimate). Reasons: for
the positively correlated noise that makes s/√n too small the true ρ_k decays through positive
values, so the first sign change marks where the estimate is dominated by its own noise
(≈ 1/√n); and stopping there never adds negative terms, so the correction can only widen the
uncertainty, never narrow it below s/√n (a deliberate, conservative asymmetry). A known
limitation: for flicker (1/f) noise the estimated r_k are biased low and the truncated sum
under-corrects; callers that expect such noise should also look at the Allan deviation.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import ComputationError

__all__ = ["autocorrelation", "EffectiveNumber", "effective_number", "variance_factor"]


def autocorrelation(x: Any, max_lag: int | None = None) -> np.ndarray:
    """Sample autocorrelation r_0 = 1, r_1, ..., r_max_lag of a series.

    Parameters
    ----------
    x : array_like
        The series (at least 2 finite values, not all equal).
    max_lag : int, optional
        Largest lag returned. Default n − 1.

    Returns
    -------
    ndarray
        r_k for k = 0..max_lag (dimensionless).
    """
    x = np.asarray(x, dtype=float)
    n = len(x)
    if x.ndim != 1 or n < 2:
        raise ComputationError(f"autocorrelation needs a series of at least 2 values; got {n}")
    if not np.all(np.isfinite(x)):
        raise ComputationError("the series contains NaN or infinite values")
    lag = n - 1 if max_lag is None else int(max_lag)
    if not 0 <= lag <= n - 1:
        raise ComputationError(f"max_lag must be in 0..{n - 1}; got {max_lag}")
    xc = x - x.mean()
    c0 = float(np.dot(xc, xc))
    if c0 == 0.0:
        raise ComputationError("autocorrelation of a constant series is undefined")
    size = 1 << int(math.ceil(math.log2(2 * n)))      # zero padding: no circular wrap-around
    spec = np.fft.rfft(xc, size)
    acov = np.fft.irfft(spec * np.conj(spec), size)[: lag + 1]
    return acov / c0


def variance_factor(rho: Any, n: int) -> float:
    """1 + 2·Σ_{k≥1} (1 − k/n)·ρ_k for given ρ_1, ρ_2, ... (the array starts at lag 1)."""
    rho = np.asarray(rho, dtype=float)
    k = np.arange(1, len(rho) + 1)
    return float(1.0 + 2.0 * np.sum((1.0 - k / n) * rho))


@dataclass(frozen=True)
class EffectiveNumber:
    """Result of the autocorrelation correction of the standard error of a mean.

    Parameters
    ----------
    n : int
        Number of observations.
    n_eff : float
        Effective number of independent observations, n / factor.
    factor : float
        1 + 2·Σ (1 − k/n)·r_k over the lags used (≥ 1 by the truncation rule).
    lags_used : int
        K, the number of lags in the sum (0 when r_1 ≤ 0).
    rho : tuple of float
        r_1..r_K that entered the sum.
    max_lag : int
        The cap on K that applied.
    """

    n: int
    n_eff: float
    factor: float
    lags_used: int
    rho: tuple[float, ...]
    max_lag: int

    def to_dict(self) -> dict[str, Any]:
        return {"n": self.n, "n_eff": self.n_eff, "factor": self.factor,
                "lags_used": self.lags_used, "rho": list(self.rho), "max_lag": self.max_lag,
                "rule": "initial positive sequence, capped at max_lag"}


def effective_number(x: Any, max_lag: int | None = None) -> EffectiveNumber:
    """Effective number of independent observations by the truncated Zhang/Witt sum.

    Parameters
    ----------
    x : array_like
        The series (at least 4 values).
    max_lag : int, optional
        Cap on the number of lags summed. Default ⌊n/4⌋ (see the module docstring).
    """
    x = np.asarray(x, dtype=float)
    n = len(x)
    if n < 4:
        raise ComputationError(f"the autocorrelation correction needs at least 4 values; got {n}")
    cap = n // 4 if max_lag is None else max(0, min(int(max_lag), n - 1))
    r = autocorrelation(x, cap)[1:]
    nonpos = np.flatnonzero(r <= 0.0)
    k_used = int(nonpos[0]) if nonpos.size else len(r)
    used = r[:k_used]
    factor = variance_factor(used, n)
    return EffectiveNumber(n=n, n_eff=n / factor, factor=factor, lags_used=k_used,
                           rho=tuple(float(v) for v in used), max_lag=cap)
