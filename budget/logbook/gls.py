"""Weighted means of runs that share terms: generalised least squares with a low-rank covariance.

Runs of one laboratory share terms (the same resistor calibration, the same voltmeter
certificate): their covariance matrix is V = D + B·Bᵀ, where B[i, k] is run i's signed
contribution c·u of shared term k (a term with the same source identity in two or more runs,
as in :mod:`budget.compare`) and D the diagonal of what is left, d_i = u_i² − Σ_k B[i, k]².
The weighted mean of runs S is the generalised least-squares estimate (Aitken; common practice)

    x̄ = 1ᵀV⁻¹x / 1ᵀV⁻¹1,   u²(x̄) = 1 / 1ᵀV⁻¹1,   χ² = (x − x̄)ᵀ V⁻¹ (x − x̄),  ν = N − 1,

the generalised χ² (for V diagonal, the textbook Σ w_i (x_i − x̄)²). With the Woodbury identity
V⁻¹ = D⁻¹ − D⁻¹B M⁻¹ BᵀD⁻¹, M = I + BᵀD⁻¹B, every quantity is a function of sums over the runs
(Σ 1/d, Σ x/d, Σ x²/d, Σ B/d, Σ xB/d, Σ BBᵀ/d), so running means cost O(K²) per run, never an
N×N matrix. The covariance of another run j (not in S) with x̄ is B_j·M⁻¹c / 1ᵀV⁻¹1 with
c = Σ B/d, and of two means over disjoint sets S, T it is (M_S⁻¹c_S)·(M_T⁻¹c_T)/(w_S·w_T).

Correlations between *different* shared terms inside one record are not carried (each shared
term is its own component); :mod:`budget.compare` carries them for a handful of runs.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special

__all__ = ["Sums", "MeanStats", "mean_stats", "cov_of_means", "running_means"]


@dataclass
class Sums:
    """Running sums over a set of runs (mutable on purpose: add() accumulates).

    The values are summed *centred* on a reference ``ref`` (the first value added, or the
    unweighted mean in :meth:`of`): Σ(x − ref)/d, Σ(x − ref)²/d, so that χ² = Σ(x−ref)²/d −
    w·(x̄−ref)² keeps its digits when |x|/u is large (a current of 1.5e-10 A known to 1e-8
    relative); χ² and u do not change under an exact offset or scale of the values.
    """

    k: int
    s1: float = 0.0
    sx: float = 0.0
    sxx: float = 0.0
    n: int = 0
    ref: float = 0.0

    def __post_init__(self) -> None:
        self.c = np.zeros(self.k)
        self.e = np.zeros(self.k)
        self.m = np.eye(self.k)

    def add(self, x: float, d: float, b: np.ndarray) -> None:
        """One run: value ``x``, non-shared variance ``d`` > 0, shared contributions ``b``."""
        if self.n == 0:
            self.ref = float(x)
        x = x - self.ref
        self.n += 1
        self.s1 += 1.0 / d
        self.sx += x / d
        self.sxx += x * x / d
        if self.k:
            self.c += b / d
            self.e += x * b / d
            self.m += np.outer(b, b) / d

    @classmethod
    def of(cls, x: np.ndarray, d: np.ndarray, b: np.ndarray) -> Sums:
        """The sums over all runs given at once (vectorised :meth:`add`)."""
        s = cls(b.shape[1])
        s.n = len(x)
        s.ref = float(np.mean(x)) if len(x) else 0.0
        x = x - s.ref
        s.s1, s.sx, s.sxx = float(np.sum(1 / d)), float(np.sum(x / d)), float(np.sum(x * x / d))
        if s.k:
            bd = b / d[:, None]
            s.c, s.e = bd.sum(axis=0), (bd * x[:, None]).sum(axis=0)
            s.m = np.eye(s.k) + bd.T @ b
        return s

    def copy(self) -> Sums:
        out = Sums(self.k, self.s1, self.sx, self.sxx, self.n, self.ref)
        out.c, out.e, out.m = self.c.copy(), self.e.copy(), self.m.copy()
        return out


@dataclass(frozen=True)
class MeanStats:
    """The GLS weighted mean of N runs, in the runs' unit."""

    n: int
    value: float
    standard_uncertainty: float
    chi2: float
    dof: int
    p_value: float | None         # P(χ²_ν ≥ χ²); None for one run
    birge_ratio: float | None
    g: tuple[float, ...]          # M⁻¹c (for covariances with other runs or means)
    weight: float                 # 1ᵀV⁻¹1 = 1/u²(x̄)

    def to_dict(self) -> dict:
        return {"n": self.n, "value": self.value,
                "standard_uncertainty": self.standard_uncertainty, "chi2": self.chi2,
                "dof": self.dof, "p_value": self.p_value, "birge_ratio": self.birge_ratio}

    def cov_with_run(self, b: np.ndarray) -> float:
        """cov(x_j, x̄) of a run j outside the set, with shared contributions ``b``."""
        return float(np.dot(b, self.g)) / self.weight if len(self.g) else 0.0


def mean_stats(s: Sums) -> MeanStats:
    """The weighted mean, its u, χ², ν and p from the sums (see module docstring)."""
    if s.n == 0:
        raise ValueError("no runs")
    if s.k:
        sol = np.linalg.solve(s.m, np.column_stack([s.c, s.e]))
        g, h = sol[:, 0], sol[:, 1]
        w = s.s1 - float(s.c @ g)
        xv = s.sx - float(s.c @ h)
        xx = s.sxx - float(s.e @ h)
    else:
        g = np.zeros(0)
        w, xv, xx = s.s1, s.sx, s.sxx
    mean = xv / w                   # relative to s.ref
    # χ² as yᵀV⁻¹y − w·ȳ² with y = x − ref (centred: the cancellation is that of the scatter
    # about the mean, not of |x|/u); clip the rounding noise of a perfect fit
    chi2 = max(xx - w * mean * mean, 0.0)
    mean += s.ref
    dof = s.n - 1
    p = float(special.chdtrc(dof, chi2)) if dof > 0 else None
    rb = math.sqrt(chi2 / dof) if dof > 0 else None
    return MeanStats(n=s.n, value=mean, standard_uncertainty=1.0 / math.sqrt(w), chi2=chi2,
                     dof=dof, p_value=p, birge_ratio=rb, g=tuple(float(x) for x in g),
                     weight=w)


def cov_of_means(a: MeanStats, b: MeanStats) -> float:
    """cov(x̄_S, x̄_T) of two means over disjoint sets of runs (through shared terms only)."""
    if not a.g:
        return 0.0
    return float(np.dot(a.g, b.g)) / (a.weight * b.weight)


def running_means(x: np.ndarray, d: np.ndarray, b: np.ndarray, upto: np.ndarray
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """GLS means of the first ``upto[j]`` runs, for every j at once (prefix sums).

    Returns (mean, weight = 1ᵀV⁻¹1, g = M⁻¹c) with g of shape (len(upto), K); ``upto`` ≥ 1.
    Memory grows as len(x)·K², so K (shared terms) is expected to be tens, not thousands.
    """
    idx = np.asarray(upto, dtype=int) - 1
    ref = float(x[0]) if len(x) else 0.0      # centred, as in Sums
    x = x - ref
    s1 = np.cumsum(1 / d)[idx]
    sx = np.cumsum(x / d)[idx]
    k = b.shape[1]
    if k == 0:
        return sx / s1 + ref, s1, np.zeros((len(idx), 0))
    bd = b / d[:, None]
    c = np.cumsum(bd, axis=0)[idx]
    e = np.cumsum(bd * x[:, None], axis=0)[idx]
    m = np.eye(k) + np.cumsum(bd[:, :, None] * b[:, None, :], axis=0)[idx]
    sol = np.linalg.solve(m, np.stack([c, e], axis=2))
    g, h = sol[..., 0], sol[..., 1]
    w = s1 - np.einsum("ij,ij->i", c, g)
    mean = (sx - np.einsum("ij,ij->i", c, h)) / w + ref
    return mean, w, g

