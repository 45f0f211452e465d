"""Segments and cycle differences of a pump-on/pump-off record, and their white-noise model.

Segments
--------
A segment is a maximal run of readings with the same pump state. Readings closer than
``settle_s`` to the first reading of their segment (the switch) or closer than ``tail_s`` to its
last reading are discarded; a segment is summarised by the mean of its kept readings and their
mean time. All bookkeeping is vectorised (``np.bincount`` over a segment index per reading).

Cycle differences
-----------------
For each on segment j the estimate d_j = m_j − ô_j, where ô_j is the off level interpolated to
the on segment's mean time t_j:

* ``"linear"``: from the two neighbouring off segments j − 1, j + 1, weighted by time,
  ô = w·o_{j−1} + (1 − w)·o_{j+1}, w = (t_{j+1} − t_j)/(t_{j+1} − t_{j−1}). Exact for an offset
  that drifts linearly, whatever the segment lengths; w = 1/2 for a regular record, which is
  the classic "mean of the two neighbours".
* ``"cubic"``: Lagrange interpolation through the off segments j − 3, j − 1, j + 1, j + 3; exact
  for an offset drifting as a cubic polynomial (weights −1/16, 9/16, 9/16, −1/16 for a regular
  record). Costs noise (Σw² = 0.64 instead of 0.5) and one more cycle at each end.

Every d_j is a linear combination of segment means, d = W·m, with W sparse.

White-noise model
-----------------
If the readings carry white noise of one-sided density S (reading/√Hz) and are sampled every
Δt without dead time, segment means are independent with variances S²·v_j, v_j = 1/(2·k_j·Δt)
(k_j kept readings). Then Cov(d) = S²·C, C = W·diag(v)·Wᵀ, and for the n differences used

* Var(d̄) = S²·1ᵀC1/n²;
* E[s²] = S²·tr(PC)/(n − 1), P = I − 11ᵀ/n (the sample variance of correlated values);
* so u²(d̄) = s²·g with g = (1ᵀC1/n²)/(tr(PC)/(n − 1)) is *unbiased* under white noise;
* ν = tr(PC)²/tr((PC)²) (Satterthwaite's degrees of freedom of the quadratic form s²).

For a regular record and the linear estimator, C is tridiagonal with 3/2 on the diagonal and 1/4
beside it (in units of the segment variance), so neighbouring differences have correlation
ρ_1 = (1/4)/(3/2) = 1/6 and Var(d̄) = (s²/n)·(1 + 2ρ_1) = (4/3)·s²/n for large n: the naive
s/√n is too small by a factor √(3/4) = 0.866 (13.4 % low). With on and off time equal, a kept
fraction δ of each segment and total time T this gives u(d̄) = S·√(2/(δ·T)).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import sparse

from ..errors import ComputationError

__all__ = ["ESTIMATORS", "Segments", "segment", "Differences", "differences", "WhiteModel",
           "white_model", "avar_model", "stack"]

#: estimator -> (off segments used on each side, description)
ESTIMATORS = {
    "linear": (1, "on segment minus its two neighbouring off segments interpolated linearly to "
                  "its mean time (cancels a linear offset drift)"),
    "cubic": (2, "on segment minus the four nearest off segments interpolated by a cubic to its "
                 "mean time (cancels an offset drift up to a cubic)"),
}


@dataclass(frozen=True)
class Segments:
    """Runs of equal pump state in one record (arrays indexed by segment).

    Attributes
    ----------
    start, stop : ndarray of int
        Reading indices [start, stop) of each segment.
    on : ndarray of bool
        Pump state of each segment.
    kept : ndarray of int
        Readings kept after the settle and tail cuts.
    mean : ndarray
        Mean kept reading (NaN where none kept).
    t_mean : ndarray
        Mean time of the kept readings, s.
    t_first : ndarray
        Time of the first reading (the switch), s.
    keep : ndarray of bool
        Per reading: kept by the cuts.
    seg_of : ndarray of int
        Per reading: its segment index.
    dt : float
        Median sampling interval, s.
    """

    start: np.ndarray
    stop: np.ndarray
    on: np.ndarray
    kept: np.ndarray
    mean: np.ndarray
    t_mean: np.ndarray
    t_first: np.ndarray
    keep: np.ndarray
    seg_of: np.ndarray
    dt: float

    @property
    def count(self) -> int:
        return len(self.start)


def segment(time: np.ndarray, reading: np.ndarray, on: np.ndarray, settle_s: float,
            tail_s: float = 0.0) -> Segments:
    """Split a record into segments and apply the settle and tail cuts (see module docstring).

    ``time`` must be strictly increasing (s); ``reading`` in any unit; ``on`` boolean.
    """
    n = len(time)
    if n < 2:
        raise ComputationError(f"a record needs at least 2 readings; got {n}")
    change = np.flatnonzero(on[1:] != on[:-1]) + 1
    start = np.concatenate(([0], change))
    stop = np.concatenate((change, [n]))
    seg_of = np.repeat(np.arange(len(start)), stop - start)
    t_first = time[start]
    t_last = time[stop - 1]
    # a tolerance of 1e-9 s keeps readings that sit exactly on the cut despite rounding in time
    keep = ((time - t_first[seg_of]) >= settle_s - 1e-9) & ((t_last[seg_of] - time) >= tail_s - 1e-9)
    kept = np.bincount(seg_of, weights=keep, minlength=len(start)).astype(np.int64)
    ref = float(reading[0])        # summing deviations from one reading keeps precision
    sums = np.bincount(seg_of, weights=np.where(keep, reading - ref, 0.0), minlength=len(start))
    tsum = np.bincount(seg_of, weights=np.where(keep, time - t_first[seg_of], 0.0),
                       minlength=len(start))
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = sums / kept + ref
        t_mean = tsum / kept + t_first
    dt = float(np.median(np.diff(time)))
    return Segments(start=start, stop=stop, on=on[start].astype(bool), kept=kept, mean=mean,
                    t_mean=t_mean, t_first=t_first, keep=keep, seg_of=seg_of, dt=dt)


@dataclass(frozen=True)
class Differences:
    """Cycle differences of one or more records and the sparse weights that made them.

    Attributes
    ----------
    d : ndarray
        The differences, reading unit.
    t : ndarray
        Mean time of each on segment, s (file-local).
    on_seg : ndarray of int
        Segment index of each on segment (within its record).
    record : ndarray of int
        Record (file) index of each difference.
    w_row, w_col, w_val : ndarray
        Non-zero entries of W (row = difference, column = segment of the stacked records).
    v : ndarray
        Segment variances per unit S² (1/(2 k Δt)), one per column of W.
    involved : ndarray of int
        Segment indices (within the record) whose means enter the differences.
    """

    d: np.ndarray
    t: np.ndarray
    on_seg: np.ndarray
    record: np.ndarray
    w_row: np.ndarray
    w_col: np.ndarray
    w_val: np.ndarray
    v: np.ndarray
    involved: np.ndarray

    @property
    def n(self) -> int:
        return len(self.d)

    def matrix(self) -> sparse.csr_matrix:
        return sparse.csr_matrix((self.w_val, (self.w_row, self.w_col)),
                                 shape=(self.n, len(self.v)))

    def subset(self, keep: np.ndarray) -> Differences:
        """The differences where ``keep`` is True (W rows renumbered, columns unchanged)."""
        keep = np.asarray(keep, dtype=bool)
        new_index = np.cumsum(keep) - 1
        sel = keep[self.w_row]
        involved = np.unique(self.w_col[sel])
        return Differences(d=self.d[keep], t=self.t[keep], on_seg=self.on_seg[keep],
                           record=self.record[keep], w_row=new_index[self.w_row[sel]],
                           w_col=self.w_col[sel], w_val=self.w_val[sel], v=self.v,
                           involved=involved)


def usable_on_segments(seg: Segments, estimator: str) -> np.ndarray:
    """On segments with enough off segments on both sides for the estimator.

    The first and last segments of a record may be cut short by its start and end (or by a
    time window); when the cuts leave them no reading they are not used, and the cycles that
    would need them are incomplete. An empty segment inside the record is left for the caller
    to report.
    """
    side = ESTIMATORS[estimator][0]
    reach = 2 * side - 1                      # 1 for linear (j ± 1), 3 for cubic (j ± 1, j ± 3)
    first = 0 if seg.kept[0] > 0 else 1
    last = seg.count - 1 if seg.kept[-1] > 0 else seg.count - 2
    j = np.flatnonzero(seg.on)
    return j[(j - reach >= first) & (j + reach <= last)]


def differences(seg: Segments, estimator: str, record: int = 0) -> Differences:
    """Cycle differences of one record; every involved segment must have kept readings."""
    if estimator not in ESTIMATORS:
        raise ComputationError(f"unknown estimator {estimator!r}")
    j = usable_on_segments(seg, estimator)
    if estimator == "linear":
        offs = np.stack([j - 1, j + 1], axis=1)
    else:
        offs = np.stack([j - 3, j - 1, j + 1, j + 3], axis=1)
    t_off = seg.t_mean[offs]                   # shape (n, p)
    t_on = seg.t_mean[j][:, None]
    # Lagrange basis polynomials of the off times evaluated at the on time
    p = offs.shape[1]
    w = np.ones_like(t_off)
    for a in range(p):
        for b in range(p):
            if a != b:
                w[:, a] *= (t_on[:, 0] - t_off[:, b]) / (t_off[:, a] - t_off[:, b])
    d = seg.mean[j] - np.sum(w * seg.mean[offs], axis=1)
    n = len(j)
    rows = np.concatenate([np.arange(n), np.repeat(np.arange(n), p)])
    cols = np.concatenate([j, offs.ravel()])
    vals = np.concatenate([np.ones(n), -w.ravel()])
    v = 1.0 / (2.0 * np.maximum(seg.kept, 1) * seg.dt)
    involved = np.unique(cols)
    return Differences(d=d, t=seg.t_mean[j], on_seg=j, record=np.full(n, record), w_row=rows,
                       w_col=cols, w_val=vals, v=v, involved=involved)


def stack(parts: list[Differences]) -> Differences:
    """Pool the differences of several records (no segment is shared between records)."""
    offset_row = np.cumsum([0] + [p.n for p in parts])
    offset_col = np.cumsum([0] + [len(p.v) for p in parts])
    return Differences(
        d=np.concatenate([p.d for p in parts]), t=np.concatenate([p.t for p in parts]),
        on_seg=np.concatenate([p.on_seg for p in parts]),
        record=np.concatenate([p.record for p in parts]),
        w_row=np.concatenate([p.w_row + offset_row[i] for i, p in enumerate(parts)]),
        w_col=np.concatenate([p.w_col + offset_col[i] for i, p in enumerate(parts)]),
        w_val=np.concatenate([p.w_val for p in parts]),
        v=np.concatenate([p.v for p in parts]),
        involved=np.concatenate([p.involved + offset_col[i] for i, p in enumerate(parts)]))


@dataclass(frozen=True)
class WhiteModel:
    """What white reading noise implies for the differences (per unit S², see module docstring).

    Attributes
    ----------
    var_mean : float
        Var(d̄)/S² = 1ᵀC1/n², in 1/s (S² is in reading²/Hz).
    e_s2 : float
        E[s²]/S² = tr(PC)/(n − 1).
    factor : float
        g = var_mean/e_s2: u²(d̄) = s²·g.
    dof : float
        Satterthwaite degrees of freedom of s².
    gamma : ndarray
        Mean autocovariance of the differences at lags 0..3, per unit S².
    """

    var_mean: float
    e_s2: float
    factor: float
    dof: float
    gamma: np.ndarray

    @property
    def rho(self) -> np.ndarray:
        """Model autocorrelation at lags 0..3."""
        return self.gamma / self.gamma[0]


def white_model(diff: Differences) -> WhiteModel:
    """Exact moments of d̄ and s² under white reading noise for the differences in ``diff``."""
    n = diff.n
    if n < 2:
        raise ComputationError(f"at least 2 cycle differences are needed; got {n}")
    w = diff.matrix()
    c = (w @ sparse.diags(diff.v) @ w.T).tocsr()
    ones = np.ones(n)
    c1 = c @ ones
    one_c_one = float(ones @ c1)
    tr_c = float(c.diagonal().sum())
    tr_pc = tr_c - one_c_one / n
    tr_pc2 = float(c.multiply(c).sum()) - 2.0 / n * float(c1 @ c1) + (one_c_one / n) ** 2
    var_mean = one_c_one / n ** 2
    e_s2 = tr_pc / (n - 1)
    gamma = np.array([c.diagonal(k).mean() if k < n else 0.0 for k in range(4)])
    return WhiteModel(var_mean=var_mean, e_s2=e_s2, factor=var_mean / e_s2,
                      dof=tr_pc ** 2 / tr_pc2, gamma=gamma)


def avar_model(gamma: np.ndarray, m: np.ndarray) -> np.ndarray:
    """Expected Allan variance at factors m of a stationary series with autocovariance gamma.

    With block means of m values, AVAR(m) = Var(ȳ) − Cov(ȳ_j, ȳ_{j+1}), where
    Var(ȳ) = [m·γ_0 + 2·Σ_k (m − k)⁺·γ_k]/m² and Cov = Σ_k min(k, 2m − k)⁺·γ_k/m²
    (the number of pairs at lag k straddling two adjacent blocks). For m = 1: γ_0 − γ_1.
    """
    m = np.asarray(m, dtype=float)[:, None]
    k = np.arange(1, len(gamma))[None, :]
    g = np.asarray(gamma, dtype=float)
    var = (m[:, 0] * g[0] + 2.0 * np.sum(np.clip(m - k, 0, None) * g[1:], axis=1)) / m[:, 0] ** 2
    cov = np.sum(np.clip(np.minimum(k, 2 * m - k), 0, None) * g[1:], axis=1) / m[:, 0] ** 2
    return var - cov
