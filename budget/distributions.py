"""Probability distributions assigned to input quantities (JCGM 100 §4.3, JCGM 101 §6.4).

Each distribution knows its expectation, its standard deviation (the standard uncertainty it
implies), how to draw samples for the Monte Carlo method and its inverse distribution function
(used to correlate non-Gaussian inputs through a Gaussian copula).

Standard deviations (JCGM 101 Table 1 / §6.4):

* rectangular on [a, b]: (b − a)/√12
* symmetric triangular on [a, b]: (b − a)/√24; general triangular with mode c:
  √((a² + b² + c² − ab − ac − bc)/18), computed as √(((a−b)² + (a−c)² + (b−c)²)/36)
* arcsine (U-shaped) on [a, b]: (b − a)/√8
* trapezoidal on [a, b] with top-to-base ratio β: (b − a)·√((1 + β²)/24)
* scaled and shifted Student t with ν > 2 and scale s: s·√(ν/(ν − 2))
* sampled: the distribution of a sample (e.g. a quantity propagated from a fit's parameter
  samples), kept as its quantile function at :data:`SAMPLED_POINTS` equally spaced
  probabilities 0, 1/M, …, 1 (the sample's quantiles; the two end points chosen so that each
  outer segment has the mean of the samples in its tail), linear in between, standardised and then scaled so that its expectation and standard deviation are
  the sample's mean and standard deviation exactly. Drawn by inversion, x = F⁻¹(r) with r
  uniform (JCGM 101 §6.4.1 / C.2, sampling from a distribution function); its shape — the
  asymmetry of the sample — reaches the Monte Carlo method.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special

from .errors import BudgetError

__all__ = ["Distribution", "KINDS", "SAMPLED_POINTS"]

#: kinds a spec may name (``sampled`` is made only by input modules, from their samples)
KINDS = ("normal", "rectangular", "triangular", "arcsine", "trapezoidal", "student-t")
#: number of quantiles kept for a ``sampled`` distribution (M + 1 with M = 256)
SAMPLED_POINTS = 257


@dataclass(frozen=True)
class Distribution:
    """A named distribution with its parameters.

    Use the constructors (:meth:`normal`, :meth:`rectangular`, ...) rather than the fields.

    Parameters
    ----------
    kind : str
        One of :data:`KINDS`.
    loc : float
        Expectation (normal, student-t) — for bounded kinds, the mode or centre.
    scale : float
        Standard deviation (normal) or scale s (student-t); 0 for bounded kinds.
    low, high : float
        Bounds of the bounded kinds (NaN otherwise).
    beta : float
        Trapezoid top-to-base ratio, 0 ≤ β ≤ 1 (NaN otherwise).
    dof : float
        Degrees of freedom of the Student t (NaN otherwise).
    quantiles : tuple of float
        ``sampled`` only: the standardised quantile function (mean 0, standard deviation 1)
        at probabilities j/M, j = 0..M; ``loc`` and ``scale`` are then the mean and the
        standard deviation.
    """

    kind: str
    loc: float = 0.0
    scale: float = 0.0
    low: float = math.nan
    high: float = math.nan
    beta: float = math.nan
    dof: float = math.nan
    quantiles: tuple[float, ...] = ()

    # ----------------------------------------------------------------- constructors
    @classmethod
    def normal(cls, mean: float, sd: float) -> Distribution:
        """Gaussian with expectation ``mean`` and standard deviation ``sd`` (≥ 0)."""
        if not sd >= 0:
            raise BudgetError(f"standard uncertainty must be >= 0; got {sd!r}",
                              field="standard_uncertainty")
        return cls("normal", loc=float(mean), scale=float(sd))

    @classmethod
    def rectangular(cls, low: float, high: float) -> Distribution:
        """Uniform on [low, high]."""
        cls._check_bounds(low, high)
        return cls("rectangular", loc=(low + high) / 2, low=float(low), high=float(high))

    @classmethod
    def triangular(cls, low: float, high: float, mode: float | None = None) -> Distribution:
        """Triangular on [low, high] with the given mode (default: the midpoint)."""
        cls._check_bounds(low, high)
        c = (low + high) / 2 if mode is None else float(mode)
        if not low <= c <= high:
            raise BudgetError(f"mode must lie within [low, high]; got {c!r}", field="mode")
        return cls("triangular", loc=c, low=float(low), high=float(high))

    @classmethod
    def arcsine(cls, low: float, high: float) -> Distribution:
        """U-shaped (arcsine) on [low, high], e.g. a sinusoidally varying quantity."""
        cls._check_bounds(low, high)
        return cls("arcsine", loc=(low + high) / 2, low=float(low), high=float(high))

    @classmethod
    def trapezoidal(cls, low: float, high: float, beta: float) -> Distribution:
        """Symmetric trapezoid on [low, high]; ``beta`` = top width / base width (0..1)."""
        cls._check_bounds(low, high)
        if not 0.0 <= beta <= 1.0:
            raise BudgetError(f"beta must lie in [0, 1]; got {beta!r}", field="beta")
        return cls("trapezoidal", loc=(low + high) / 2, low=float(low), high=float(high),
                   beta=float(beta))

    @classmethod
    def student_t(cls, loc: float, scale: float, dof: float) -> Distribution:
        """Scaled and shifted t: ``loc + scale * T_dof`` (JCGM 101 §6.4.9)."""
        if not scale >= 0:
            raise BudgetError(f"scale must be >= 0; got {scale!r}", field="standard_uncertainty")
        if not (dof > 0 and math.isfinite(dof)):
            raise BudgetError(f"a Student t needs finite dof > 0; got {dof!r}", field="dof")
        return cls("student-t", loc=float(loc), scale=float(scale), dof=float(dof))

    @classmethod
    def sampled(cls, samples: np.ndarray, mean: float | None = None, sd: float | None = None,
                points: int = SAMPLED_POINTS) -> Distribution:
        """The distribution of ``samples`` kept as a quantile table (module docstring).

        Parameters
        ----------
        samples : array-like
            The sample (same unit as the quantity), at least ``points`` finite values.
        mean, sd : float, optional
            Expectation and standard deviation to give it (default: the sample's, ddof = 1).
        points : int
            Quantiles kept (default :data:`SAMPLED_POINTS`).
        """
        x = np.asarray(samples, dtype=float)
        if x.size < points or not np.all(np.isfinite(x)):
            raise BudgetError(f"a sampled distribution needs at least {points} finite "
                              "samples", field="distribution")
        m = float(np.mean(x)) if mean is None else float(mean)
        s = float(np.std(x, ddof=1)) if sd is None else float(sd)
        x = np.sort(x)
        q = np.quantile(x, np.linspace(0.0, 1.0, points))
        # end points: each outer segment (probability 1/M) gets the mean of the samples in its
        # tail, so a long tail is neither cut off nor stretched to the sample's extreme
        tail = max(1, int(round(x.size / (points - 1))))
        q[0] = min(q[1], 2 * float(np.mean(x[:tail])) - q[1])
        q[-1] = max(q[-2], 2 * float(np.mean(x[-tail:])) - q[-2])
        z = _standardise(q)
        if z is None or not s > 0:
            return cls.normal(m, max(s, 0.0))
        return cls("sampled", loc=m, scale=s, quantiles=tuple(float(v) for v in z))

    @staticmethod
    def _check_bounds(low: float, high: float) -> None:
        if not (math.isfinite(low) and math.isfinite(high)):
            raise BudgetError(f"bounds must be finite; got low={low!r}, high={high!r}", field="low")
        if not low < high:
            raise BudgetError(f"low must be smaller than high; got low={low!r}, high={high!r}",
                              field="low")

    # ----------------------------------------------------------------- moments
    @property
    def mean(self) -> float:
        """Expectation of the distribution (the estimate it implies)."""
        if self.kind == "triangular":
            return (self.low + self.high + self.loc) / 3
        return self.loc

    @property
    def std(self) -> float:
        """Standard deviation = the standard uncertainty the distribution implies."""
        a, b = self.low, self.high
        if self.kind == "normal":
            return self.scale
        if self.kind == "rectangular":
            return (b - a) / math.sqrt(12)
        if self.kind == "triangular":
            c = self.loc
            # (a² + b² + c² − ab − ac − bc)/18 written as squared differences: the expanded form
            # loses digits when the bounds are close to each other relative to their size
            return math.sqrt(((a - b) ** 2 + (a - c) ** 2 + (b - c) ** 2) / 36)
        if self.kind == "arcsine":
            return (b - a) / math.sqrt(8)
        if self.kind == "trapezoidal":
            return (b - a) * math.sqrt((1 + self.beta ** 2) / 24)
        if self.kind == "student-t":
            if self.dof <= 2:
                return math.inf
            return self.scale * math.sqrt(self.dof / (self.dof - 2))
        if self.kind == "sampled":
            return self.scale
        raise BudgetError(f"unknown distribution {self.kind!r}", field="distribution")

    @property
    def skewness(self) -> float:
        """Standardised third central moment γ = μ₃/σ³ (0 for every symmetric kind).

        Triangular on [a, b] with mode c: γ = √2 (a + b − 2c)(2a − b − c)(a − 2b + c) /
        (5 (a² + b² + c² − ab − ac − bc)^{3/2}) (common practice; scipy.stats.triang agrees).
        """
        if self.kind == "sampled":
            return _table_moment(np.asarray(self.quantiles), 3)
        if self.kind != "triangular":
            return 0.0
        a, b, c = self.low, self.high, self.loc
        q = ((a - b) ** 2 + (a - c) ** 2 + (b - c) ** 2) / 2   # a² + b² + c² − ab − ac − bc
        return math.sqrt(2) * (a + b - 2 * c) * (2 * a - b - c) * (a - 2 * b + c) / (5 * q ** 1.5)

    @property
    def kurtosis(self) -> float:
        """Standardised fourth central moment β = μ₄/σ⁴ (3 for the normal; not the excess).

        Rectangular 9/5, triangular 12/5 (any mode), arcsine 3/2, Student t 3 + 6/(ν − 4) for
        ν > 4 (infinite otherwise); a trapezoid is the sum of two independent rectangular
        variables (JCGM 101 §6.4.4.4) with variances σ₁², σ₂², so its fourth cumulant is
        −6/5 (σ₁⁴ + σ₂⁴) and β = 3 − 6/5 (σ₁⁴ + σ₂⁴)/(σ₁² + σ₂²)² (derived from the additivity
        of cumulants). Values from the standard tables of these distributions (common practice).
        """
        if self.kind == "normal":
            return 3.0
        if self.kind == "rectangular":
            return 1.8
        if self.kind == "triangular":
            return 2.4
        if self.kind == "arcsine":
            return 1.5
        if self.kind == "trapezoidal":
            v1, v2 = (1 + self.beta) ** 2, (1 - self.beta) ** 2     # ∝ σ₁², σ₂²
            return 3 - 1.2 * (v1 ** 2 + v2 ** 2) / (v1 + v2) ** 2
        if self.kind == "student-t":
            return 3 + 6 / (self.dof - 4) if self.dof > 4 else math.inf
        if self.kind == "sampled":
            return _table_moment(np.asarray(self.quantiles), 4)
        raise BudgetError(f"unknown distribution {self.kind!r}", field="distribution")

    @property
    def half_width(self) -> float:
        """Half the width of a bounded distribution (NaN for unbounded ones)."""
        return (self.high - self.low) / 2

    # ----------------------------------------------------------------- sampling
    def sample(self, rng: np.random.Generator, n: int) -> np.ndarray:
        """Draw ``n`` independent samples with ``rng`` (float64 array)."""
        a, b = self.low, self.high
        if self.kind == "normal":
            if self.scale == 0:
                return np.full(n, self.loc)
            return rng.normal(self.loc, self.scale, n)
        if self.kind == "rectangular":
            return rng.uniform(a, b, n)
        if self.kind == "triangular":
            return rng.triangular(a, self.loc, b, n)
        if self.kind == "arcsine":
            # JCGM 101 §6.4.6.4: x = (a + b)/2 + (b − a)/2 · sin(2πr), r uniform on [0, 1]
            return (a + b) / 2 + (b - a) / 2 * np.sin(2 * np.pi * rng.random(n))
        if self.kind == "trapezoidal":
            # JCGM 101 §6.4.4.4: x = a + (b − a)/2 · [(1 + β) r1 + (1 − β) r2]
            r1, r2 = rng.random(n), rng.random(n)
            return a + (b - a) / 2 * ((1 + self.beta) * r1 + (1 - self.beta) * r2)
        if self.kind == "student-t":
            return self.loc + self.scale * rng.standard_t(self.dof, n)
        if self.kind == "sampled":
            return self.ppf(rng.random(n))
        raise BudgetError(f"unknown distribution {self.kind!r}", field="distribution")

    def ppf(self, p: np.ndarray) -> np.ndarray:
        """Inverse distribution function at probabilities ``p`` (0 < p < 1)."""
        a, b = self.low, self.high
        if self.kind == "normal":
            return self.loc + self.scale * special.ndtri(p)
        if self.kind == "rectangular":
            return a + (b - a) * p
        if self.kind == "triangular":
            c = self.loc
            fc = (c - a) / (b - a)
            left = a + np.sqrt(p * (b - a) * (c - a))
            right = b - np.sqrt((1 - p) * (b - a) * (b - c))
            return np.where(p < fc, left, right)
        if self.kind == "arcsine":
            return (a + b) / 2 - (b - a) / 2 * np.cos(np.pi * p)
        if self.kind == "student-t":
            return self.loc + self.scale * special.stdtrit(self.dof, p)
        if self.kind == "trapezoidal":
            return self._trapezoid_ppf(np.asarray(p, dtype=float))
        if self.kind == "sampled":
            z = np.asarray(self.quantiles)
            return self.loc + self.scale * np.interp(p, np.linspace(0.0, 1.0, z.size), z)
        raise BudgetError(f"unknown distribution {self.kind!r}", field="distribution")

    def _trapezoid_ppf(self, p: np.ndarray) -> np.ndarray:
        # Symmetric trapezoid on [-1, 1] (half-widths: base 1, top β), inverted piecewise.
        beta = self.beta
        if beta == 1.0:
            z = 2 * p - 1
        else:
            h = 1.0 / (1 + beta)          # density on the top
            ramp = (1 - beta) / 2 * h     # probability in each ramp
            q = np.minimum(p, 1 - p)
            in_ramp = q < ramp
            # ramp: F(z) = h (z + 1)^2 / (2 (1 − β)), z in [−1, −β]
            z_ramp = -1 + np.sqrt(2 * (1 - beta) * q / h)
            z_top = -beta + (q - ramp) / h
            zl = np.where(in_ramp, z_ramp, z_top)
            z = np.where(p <= 0.5, zl, -zl)
        return (self.low + self.high) / 2 + (self.high - self.low) / 2 * z

    # ----------------------------------------------------------------- text and records
    def describe(self) -> str:
        """Short human-readable form, e.g. ``"rectangular [9.99, 10.01]"``."""
        if self.kind == "normal":
            return "normal"
        if self.kind == "student-t":
            return f"Student t (ν = {self.dof:g})"
        if self.kind == "trapezoidal":
            return f"trapezoidal (β = {self.beta:g})"
        if self.kind == "sampled":
            return f"sampled (skewness {self.skewness:.2g})"
        return self.kind

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form: the kind plus only the parameters it uses."""
        d: dict[str, Any] = {"kind": self.kind}
        if self.kind == "sampled":
            d.update(loc=self.loc, scale=self.scale, quantiles=list(self.quantiles))
        elif self.kind in ("normal", "student-t"):
            d.update(loc=self.loc, scale=self.scale)
            if self.kind == "student-t":
                d["dof"] = self.dof
        else:
            d.update(low=self.low, high=self.high)
            if self.kind == "triangular":
                d["mode"] = self.loc
            if self.kind == "trapezoidal":
                d["beta"] = self.beta
        return d

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Distribution:
        kind = d["kind"]
        if kind == "normal":
            return cls.normal(d["loc"], d["scale"])
        if kind == "student-t":
            return cls.student_t(d["loc"], d["scale"], d["dof"])
        if kind == "rectangular":
            return cls.rectangular(d["low"], d["high"])
        if kind == "triangular":
            return cls.triangular(d["low"], d["high"], d.get("mode"))
        if kind == "arcsine":
            return cls.arcsine(d["low"], d["high"])
        if kind == "trapezoidal":
            return cls.trapezoidal(d["low"], d["high"], d["beta"])
        if kind == "sampled":
            z = np.asarray(d["quantiles"], dtype=float)
            if (z.ndim != 1 or z.size < 3 or not np.all(np.isfinite(z))
                    or np.any(np.diff(z) < 0) or not float(d["scale"]) >= 0):
                raise BudgetError("a sampled distribution needs at least 3 finite, "
                                  "non-decreasing quantiles and a scale >= 0",
                                  field="distribution")
            return cls("sampled", loc=float(d["loc"]), scale=float(d["scale"]),
                       quantiles=tuple(float(v) for v in z))
        raise BudgetError(f"unknown distribution {kind!r}", field="distribution")


def _segment_moments(q: np.ndarray, k: int) -> float:
    """∫₀¹ Q(p)^k dp for Q linear between the table values q_j at p = j/M (exact: 3-point
    Gauss–Legendre on each segment integrates polynomials up to degree 5)."""
    nodes, weights = np.polynomial.legendre.leggauss(3)
    t = (nodes + 1) / 2                      # on [0, 1]
    a, b = q[:-1, None], q[1:, None]
    vals = (a + (b - a) * t[None, :]) ** k
    return float(np.sum(vals @ (weights / 2)) / (q.size - 1))


def _standardise(q: np.ndarray) -> np.ndarray | None:
    """The quantile table shifted and scaled to mean 0 and standard deviation 1 (None when
    it has no spread)."""
    m = _segment_moments(q, 1)
    var = _segment_moments(q - m, 2)
    if not var > 0:
        return None
    return (q - m) / math.sqrt(var)


def _table_moment(z: np.ndarray, k: int) -> float:
    """Standardised k-th moment of a standardised quantile table (skewness k = 3, kurtosis
    k = 4)."""
    return _segment_moments(z, k)
