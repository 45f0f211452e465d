"""Glitches in an on/off record: cycle differences that are outliers by a robust rule.

Rule
----
A cycle difference d_i is flagged when |d_i − median(d)| > L·σ_MAD, with
σ_MAD = 1.4826·median(|d − median(d)|) and L = ``rejection_limit`` (default 5). The factor
1.4826 = 1/Φ⁻¹(3/4) makes σ_MAD a consistent estimate of σ for normal data (derivation); the
median absolute deviation as the robust scale of outlier screening is common practice
(NIST/SEMATECH e-Handbook of Statistical Methods, §1.3.5.17, the modified z-score of Iglewicz
and Hoaglin — memory). At L = 5 a normal difference is flagged with probability 5.7·10⁻⁷, so
a clean record of 10⁴ cycles is flagged about once in 170 runs (2·Φ(−5) per cycle —
derivation). One glitch in an off segment spoils the two cycles that share it; both are flagged.

Flagging never rejects: with ``rejection = "none"`` (the default) the flagged cycles stay in the
result and the module's warning ``cycles.glitch`` names each (file, rows, time, distance in
σ_MAD) with the result it would give without them; ``rejection = "mad"`` rejects them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["MAD_FACTOR", "Screen", "screen"]

#: 1/Φ⁻¹(3/4): σ of a normal distribution over its median absolute deviation.
MAD_FACTOR = 1.4826


@dataclass(frozen=True)
class Screen:
    """The robust screen of the cycle differences (reading unit)."""

    median: float
    sigma_mad: float
    limit: float
    distance: np.ndarray      # |d − median| / σ_MAD per cycle (0 where σ_MAD = 0)
    flagged: np.ndarray       # bool per cycle

    def to_dict(self) -> dict:
        return {"rule": f"|d − median| > {self.limit:g}·σ_MAD, σ_MAD = {MAD_FACTOR}·MAD",
                "median": self.median, "sigma_mad": self.sigma_mad, "limit": self.limit,
                "flagged": int(self.flagged.sum())}


def screen(d: np.ndarray, limit: float = 5.0) -> Screen:
    """Flag the cycle differences ``d`` farther than ``limit`` σ_MAD from their median."""
    d = np.asarray(d, dtype=float)
    med = float(np.median(d))
    sig = MAD_FACTOR * float(np.median(np.abs(d - med)))
    if sig > 0:
        dist = np.abs(d - med) / sig
    else:
        dist = np.zeros(len(d))
    return Screen(median=med, sigma_mad=sig, limit=limit, distance=dist, flagged=dist > limit)
