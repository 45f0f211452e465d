"""Batches of the Monte Carlo method: the adaptive stop (JCGM 101 §7.9.4) and the numerical
accuracy of a run (standard deviation of the batch results / √h).

See :mod:`budget.propagate.mcm` for where this tool is stricter than §7.9: at least
:data:`MIN_BATCHES` batches before the stop is tested, the stop tolerance
min(δ(u_MC), δ(u_c))/5, and a fixed number of trials split into :func:`fixed_batches` batches
to estimate (not to stabilise) its accuracy.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from .validate import numerical_tolerance

__all__ = ["MIN_BATCHES", "FIXED_BATCHES", "VALIDATION_DIVISOR", "Accuracy", "fixed_batches",
           "adaptive_batch_size", "coverage_intervals", "batch_stats", "accuracy_of", "stable"]

VALIDATION_DIVISOR = 5  # adaptive stop at δ/5 (JCGM 101 §8.2), see budget.propagate.mcm
MIN_BATCHES = 10  # adaptive: at least 10 batches before the stop is tested (budget.propagate.mcm)
FIXED_BATCHES = {"random": 10, "sobol": 16}  # batches of a fixed run (a power of two for RQMC)


def coverage_intervals(sorted_y: np.ndarray, p: float) -> tuple[tuple[float, float],
                                                                tuple[float, float]]:
    """Probabilistically symmetric and shortest 100p % intervals from sorted samples.

    JCGM 101 §7.7: q = pM + ½ rounded down; symmetric: r = (M − q)/2 (rounded up to an integer
    when needed), interval [y_(r), y_(r+q)] in 1-based order statistics; shortest: the r* that
    minimises y_(r+q) − y_(r) for r = 1 … M − q (the first such r on ties).

    Parameters
    ----------
    sorted_y : numpy.ndarray
        The M output samples in ascending order (M ≥ 2), in the output's unit.
    p : float
        Coverage probability, in (0, 1).

    Returns
    -------
    tuple
        ``((low, high), (low, high))``: the symmetric and the shortest interval, in the
        samples' unit.
    """
    m = sorted_y.size
    q = int(p * m + 0.5)
    q = min(max(q, 1), m - 1)
    r = (m - q) // 2 if (m - q) % 2 == 0 else (m - q + 1) // 2
    r = max(r, 1)
    sym = (float(sorted_y[r - 1]), float(sorted_y[r + q - 1]))
    widths = sorted_y[q:] - sorted_y[: m - q]
    i = int(np.argmin(widths))
    short = (float(sorted_y[i]), float(sorted_y[i + q]))
    return sym, short


@dataclass(frozen=True)
class Accuracy:
    """Numerical standard uncertainty of the Monte Carlo results, from h batches.

    Each value is s/√h, s the standard deviation of the h batch results (JCGM 101 §7.9.4 d)),
    in the output's unit: the standard uncertainty that the Monte Carlo sampling alone gives
    the result of all the trials.
    """

    batches: int
    value: float
    standard_uncertainty: float
    symmetric: tuple[float, float]
    shortest: tuple[float, float]

    def to_dict(self) -> dict:
        """JSON-ready fields (in the output's unit)."""
        return {"batches": self.batches, "value": self.value,
                "standard_uncertainty": self.standard_uncertainty,
                "symmetric": list(self.symmetric), "shortest": list(self.shortest)}

    def interval(self, kind: str) -> tuple[float, float]:
        """(s_low, s_high) of the ``"symmetric"`` or ``"shortest"`` interval."""
        return self.shortest if kind == "shortest" else self.symmetric


def adaptive_batch_size(coverage_probability: float, sampling: str = "random") -> int:
    """Trials per batch of the adaptive procedure, M = max(⌈100/(1 − p)⌉, 10⁴) (JCGM 101 §7.9.4).

    With ``sampling="sobol"`` M is rounded up to the next power of two (16 384 at p = 0.95).

    Parameters
    ----------
    coverage_probability : float
        p, in (0, 1).
    sampling : {"random", "sobol"}
        Default "random".

    Returns
    -------
    int
        M; the procedure always runs whole batches, so ``max_trials`` must be at least M.
    """
    m = max(math.ceil(100 / (1 - coverage_probability)), 10_000)
    return 1 << (m - 1).bit_length() if sampling == "sobol" else m


def fixed_batches(trials: int, coverage_probability: float, sampling: str = "random") -> int:
    """Batches a fixed number of trials is split into to estimate its numerical accuracy.

    :data:`FIXED_BATCHES` (10 for pseudo-random sampling, 16 for RQMC), fewer when a batch
    would hold less than ⌈10/(1 − p)⌉ trials (200 at p = 0.95: each tail outside the interval
    then holds some five trials), a power of two for RQMC (each batch is a scramble of 2^k
    points). 1 when not even two such batches fit: the accuracy is then not estimated.
    """
    least = math.ceil(10 / (1 - coverage_probability))
    h = min(FIXED_BATCHES.get(sampling, 10), trials // least)
    if sampling == "sobol" and h >= 1:
        h = 1 << (h.bit_length() - 1)
    return h if h >= 2 else 1


def batch_stats(y: np.ndarray, p: float) -> tuple[float, float, float, float, float, float]:
    """Mean, standard deviation and the ends of both intervals (symmetric, shortest) of one
    batch."""
    ys = np.sort(y)
    sym, short = coverage_intervals(ys, p)
    return float(ys.mean()), float(ys.std(ddof=1)), sym[0], sym[1], short[0], short[1]


def accuracy_of(stats: list[tuple[float, ...]]) -> Accuracy | None:
    """s/√h of every batch statistic (None with fewer than two batches)."""
    h = len(stats)
    if h < 2:
        return None
    s = np.array(stats).std(axis=0, ddof=1) / math.sqrt(h)
    return Accuracy(batches=h, value=float(s[0]), standard_uncertainty=float(s[1]),
                    symmetric=(float(s[2]), float(s[3])), shortest=(float(s[4]), float(s[5])))


def stable(m: int, stats, outputs, ndig: int, interval: str = "symmetric",
            linear: Mapping[str, float] | None = None,
            used: dict[str, float] | None = None) -> bool:
    """JCGM 101 §7.9.4 e)–h): 2·s of y, u(y) and both ends of the reported interval within
    δ/5 for every output (``m`` is the batch size M, the same for every batch).

    δ = min(δ(u_MC), δ(u_c)) with ``linear[name]`` = δ(u_c) when given and positive (module
    docstring); ``used[name]`` is set to the δ/5 tested against."""
    h = len(stats)
    ends = [4, 5] if interval == "shortest" else [2, 3]
    ok = True
    for name in outputs:
        arr = np.array([s[name] for s in stats])[:, [0, 1] + ends]     # h × 4
        s = arr.std(axis=0, ddof=1) / math.sqrt(h)
        # u(y) of all h·M values from the batch means and standard deviations (exact identity
        # for equal batches: (hM − 1)·s² = (M − 1)·Σ s_r² + M·Σ (ȳ_r − ȳ)²). Concatenating the
        # batches here made each check cost O(hM), and the whole procedure O(h²M).
        dev = arr[:, 0] - arr[:, 0].mean()
        u_all = math.sqrt(((m - 1) * float(np.sum(arr[:, 1] ** 2)) + m * float(dev @ dev))
                          / (h * m - 1))
        delta = numerical_tolerance(u_all, ndig)
        if linear and linear.get(name, 0.0) > 0:
            delta = min(delta, linear[name]) if delta > 0 else linear[name]
        delta /= VALIDATION_DIVISOR
        if used is not None:
            used[name] = delta
        if not np.all(2 * s <= delta):
            ok = False
            if used is None:
                return False
    return ok
