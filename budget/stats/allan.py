"""Allan, overlapping Allan and modified Allan deviations of a series of averages.

The series ``y`` is treated like fractional-frequency data in NIST SP 1065 (Riley, *Handbook of
Frequency Stability Analysis*, 2008): each value is an average over one basic interval τ0, and
averaging over m intervals averages the *values themselves* (for on/off records the values are
the cycle differences and τ0 is one cycle). Results are in the unit of ``y``; the averaging time
is τ = m·τ0, so only the averaging factors m appear here.

With S_k = Σ_{i<k} (y_i − ȳ) (S_0 = 0, N + 1 points; S plays the part of the phase x/τ0):

* Allan deviation (non-overlapping, SP 1065 eq. 6), M = ⌊N/m⌋ block means ȳ_j:
  σ²(m) = Σ_{j=0}^{M−2} (ȳ_{j+1} − ȳ_j)² / (2(M − 1)).
* Overlapping Allan deviation (SP 1065 eq. 11):
  σ²(m) = Σ_{i=0}^{N−2m} (S_{i+2m} − 2S_{i+m} + S_i)² / (2 m² (N − 2m + 1)).
* Modified Allan deviation (SP 1065 eq. 14):
  Mod σ²(m) = Σ_{j=0}^{N−3m+1} [Σ_{i=j}^{j+m−1} (S_{i+2m} − 2S_{i+m} + S_i)]² / (2 m⁴ (N − 3m + 2)).

Subtracting the mean first changes none of these (they are built from differences) and keeps
the cumulative sums small, so no precision is lost on a large offset.

Octave factors are m = 1, 2, 4, ... while the estimator has at least one term (ADEV: two
blocks; OADEV: 2m ≤ N; MDEV: 3m ≤ N + 1).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import ComputationError

__all__ = ["KINDS", "AllanCurve", "allan_curve", "adev", "oadev", "mdev", "octave_factors",
           "max_factor", "edf_white_fm", "edf_flicker_fm"]

#: values per block in :func:`oadev` (buffers of 0.5–1 MiB: within a core's cache hierarchy,
#: few enough blocks that numpy's per-call cost stays small)
BLOCK = 65536
#: values per dot product: OpenBLAS runs a dot of at most 10⁴ values on one thread, so a busy
#: machine cannot stall it on thread synchronisation (longer dots were up to 20× slower
#: under load in the benchmark)
DOT = 8192

#: estimator name -> short description
KINDS = {
    "adev": "Allan deviation (non-overlapping)",
    "oadev": "overlapping Allan deviation",
    "mdev": "modified Allan deviation",
}


@dataclass(frozen=True)
class AllanCurve:
    """One of the deviations at a set of averaging factors.

    Parameters
    ----------
    kind : str
        ``"adev"``, ``"oadev"`` or ``"mdev"``.
    m : ndarray of int
        Averaging factors (τ/τ0).
    deviation : ndarray
        The deviation at each m, in the unit of the data.
    terms : ndarray of int
        Number of squared differences summed at each m.
    n : int
        Length of the series.
    """

    kind: str
    m: np.ndarray
    deviation: np.ndarray
    terms: np.ndarray
    n: int

    def to_dict(self) -> dict[str, Any]:
        return {"kind": self.kind, "n": int(self.n), "m": [int(v) for v in self.m],
                "deviation": [float(v) for v in self.deviation],
                "terms": [int(v) for v in self.terms]}


def max_factor(n: int, kind: str) -> int:
    """Largest averaging factor with at least one term for a series of ``n`` values."""
    if kind == "adev":
        return n // 2
    if kind == "oadev":
        return n // 2
    if kind == "mdev":
        return (n + 1) // 3
    raise ComputationError(f"unknown deviation kind {kind!r}; expected one of {', '.join(KINDS)}")


def octave_factors(n: int, kind: str = "oadev") -> np.ndarray:
    """Averaging factors 1, 2, 4, ... up to :func:`max_factor` (empty when n is too short)."""
    top = max_factor(int(n), kind)
    if top < 1:
        return np.zeros(0, dtype=np.int64)
    return 2 ** np.arange(int(np.log2(top)) + 1, dtype=np.int64)


def _prepare(y: Any, m: Any, kind: str) -> tuple[np.ndarray, np.ndarray, float]:
    """The series as float64, the checked factors and the mean (finite, or an error)."""
    y = np.asarray(y, dtype=float)
    if y.ndim != 1:
        raise ComputationError(f"the series must be one-dimensional; got shape {y.shape}")
    mean = float(y.mean()) if len(y) else 0.0
    # a NaN or infinity makes the mean non-finite; only then is the full check needed
    if not math.isfinite(mean) and not np.all(np.isfinite(y)):
        raise ComputationError("the series contains NaN or infinite values")
    if not math.isfinite(mean):
        raise ComputationError("the series is too large to average in double precision")
    if m is None:
        ms = octave_factors(len(y), kind)
    else:
        ms = np.atleast_1d(np.asarray(m))
        if ms.dtype.kind not in "iu" and not np.all(ms == np.round(ms)):
            raise ComputationError(f"averaging factors must be integers; got {ms.tolist()}")
        ms = ms.astype(np.int64)
        top = max_factor(len(y), kind)
        bad = (ms < 1) | (ms > top)
        if bad.any():
            raise ComputationError(f"averaging factor {int(ms[bad][0])} is out of range 1..{top}"
                                   f" for {KINDS[kind]} of {len(y)} values")
    if len(ms) == 0:
        raise ComputationError(f"{len(y)} values are too few for the {KINDS[kind]}")
    return y, ms, mean


def _phase(y: np.ndarray, mean: float) -> np.ndarray:
    """S_0 = 0, S_k = Σ_{i<k} (y_i − ȳ), built in place in one array (one allocation)."""
    s = np.empty(len(y) + 1)
    s[0] = 0.0
    np.subtract(y, mean, out=s[1:])
    np.cumsum(s[1:], out=s[1:])
    return s


def adev(y: Any, m: Any = None) -> AllanCurve:
    """Non-overlapping Allan deviation of ``y`` at factors ``m`` (default: octaves)."""
    y, ms, mean = _prepare(y, m, "adev")
    yc = y - mean
    dev = np.empty(len(ms))
    terms = np.empty(len(ms), dtype=np.int64)
    for j, k in enumerate(ms):
        blocks = len(yc) // k
        means = yc[: blocks * k].reshape(blocks, k).mean(axis=1)
        diff = np.diff(means)
        dev[j] = np.sqrt(np.dot(diff, diff) / (2.0 * (blocks - 1)))
        terms[j] = blocks - 1
    return AllanCurve("adev", ms, dev, terms, len(yc))


def oadev(y: Any, m: Any = None) -> AllanCurve:
    """Overlapping Allan deviation of ``y`` at factors ``m`` (default: octaves).

    Cost: one cumulative sum, then per factor the second differences
    (S_{i+2m} − S_{i+m}) − (S_{i+m} − S_i) in blocks of :data:`BLOCK` values, each block
    squared and summed (dot products of :data:`DOT` values) while it is still in the processor
    cache, so nothing is written to main memory (a whole-array version writes two arrays per
    factor and is about twice as slow at 10⁶ points). For m < BLOCK the m-sums
    a_i = S_{i+m} − S_i of a block and its m successors are formed once and differenced
    (a_{i+m} − a_i), one pass fewer.
    """
    y, ms, mean = _prepare(y, m, "oadev")
    s = _phase(y, mean)
    n1 = len(s)
    a = np.empty(2 * BLOCK)
    b = np.empty(BLOCK)
    dev = np.empty(len(ms))
    terms = np.empty(len(ms), dtype=np.int64)
    for j, k in enumerate(ms):
        nt = n1 - 2 * k
        acc = 0.0
        for lo in range(0, nt, BLOCK):
            hi = min(lo + BLOCK, nt)
            size = hi - lo
            bv = b[:size]
            if k < BLOCK:
                av = a[: size + k]
                np.subtract(s[lo + k:hi + 2 * k], s[lo:hi + k], out=av)
                np.subtract(av[k:], av[:size], out=bv)
            else:
                av = a[:size]
                np.subtract(s[lo + 2 * k:hi + 2 * k], s[lo + k:hi + k], out=av)
                np.subtract(s[lo + k:hi + k], s[lo:hi], out=bv)
                np.subtract(av, bv, out=bv)
            for p in range(0, size, DOT):
                piece = bv[p:p + DOT]
                acc += float(np.dot(piece, piece))
        dev[j] = np.sqrt(acc / (2.0 * nt)) / k
        terms[j] = nt
    return AllanCurve("oadev", ms, dev, terms, len(y))


def mdev(y: Any, m: Any = None) -> AllanCurve:
    """Modified Allan deviation of ``y`` at factors ``m`` (default: octaves)."""
    y, ms, mean = _prepare(y, m, "mdev")
    s = _phase(y, mean)
    n1 = len(s)
    dev = np.empty(len(ms))
    terms = np.empty(len(ms), dtype=np.int64)
    for j, k in enumerate(ms):
        v = s[2 * k:] - 2.0 * s[k:n1 - k] + s[:n1 - 2 * k]
        c = np.empty(len(v) + 1)
        c[0] = 0.0
        np.cumsum(v, out=c[1:])
        w = c[k:] - c[:-k]                            # sums of m consecutive second differences
        nt = len(w)
        dev[j] = np.sqrt(np.dot(w, w) / (2.0 * nt)) / (k * k)
        terms[j] = nt
    return AllanCurve("mdev", ms, dev, terms, len(y))


def allan_curve(y: Any, kind: str = "oadev", m: Any = None) -> AllanCurve:
    """Dispatch to :func:`adev`, :func:`oadev` or :func:`mdev` by name."""
    funcs = {"adev": adev, "oadev": oadev, "mdev": mdev}
    if kind not in funcs:
        raise ComputationError(f"unknown deviation kind {kind!r}; expected one of {', '.join(KINDS)}")
    return funcs[kind](y, m)


def edf_white_fm(n: int, m: Any) -> np.ndarray:
    """Equivalent degrees of freedom of the overlapping Allan variance for white noise.

    SP 1065 Table 5 (after Howe, Allan and Barnes), with N the number of *phase* points
    (n + 1 for n averages): edf = [3(N − 1)/(2m) − 2(N − 2)/N] · 4m²/(4m² + 5).
    Clipped below at 1.
    """
    big_n = float(n) + 1.0
    m = np.asarray(m, dtype=float)
    edf = (3.0 * (big_n - 1.0) / (2.0 * m) - 2.0 * (big_n - 2.0) / big_n) * (
        4.0 * m * m / (4.0 * m * m + 5.0))
    return np.maximum(edf, 1.0)


def edf_flicker_fm(n: int, m: Any) -> np.ndarray:
    """Equivalent degrees of freedom of the overlapping Allan variance for flicker noise.

    SP 1065 Table 5, N = n + 1 phase points: m = 1: 2(N − 2)²/(2.3N − 4.9) (memory: the
    square makes edf ≈ 0.87·N, as it must be for m = 1); m ≥ 2: 5N²/(4m(N + 3m)).
    Clipped below at 1.
    """
    big_n = float(n) + 1.0
    m = np.asarray(m, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        edf = np.where(m < 2, 2.0 * (big_n - 2.0) ** 2 / (2.3 * big_n - 4.9),
                       5.0 * big_n ** 2 / (4.0 * m * (big_n + 3.0 * m)))
    return np.maximum(edf, 1.0)
