"""Time gaps in an on/off record: holes in ``time_s`` and the cycles that would span them.

Rule
----
An interval between consecutive readings longer than :data:`GAP_FACTOR` (5) times the
record's median sampling interval is a *gap* (project convention: clock jitter and one or two
lost readings stay below three intervals and leave the segment means and times as the white
model assumes; a longer hole means the record lost something the user must know of). A gap
can hide a missing segment (the pump state is the same on both sides, and two segments merge
into one) or a long pause (an hour without readings across which the offset is interpolated).

**No cycle spans a gap**: a cycle difference whose segments (from the first reading of its
first off segment to the last reading of its last) contain a gap is dropped, and the warning
``cycles.time_gap`` names each gap (file, the rows either side, the times, its length) and the
cycles dropped. The record is otherwise used as it is, as if cut into pieces at the gaps.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["GAP_FACTOR", "Gap", "find_gaps", "spanning"]

#: A gap is an interval longer than this many median sampling intervals (project convention).
GAP_FACTOR = 5.0


@dataclass(frozen=True)
class Gap:
    """One hole in a record's time column.

    Attributes
    ----------
    index : int
        Index (within the readings analysed) of the reading before the gap.
    t_before, t_after : float
        Times of the readings either side, s.
    same_state : bool
        The pump state is the same on both sides (a whole segment may be missing).
    """

    index: int
    t_before: float
    t_after: float
    same_state: bool

    @property
    def length_s(self) -> float:
        return self.t_after - self.t_before

    def to_dict(self, first_row: int = 0) -> dict:
        """JSON form; rows are 1-based data rows of the file (``first_row`` readings before)."""
        return {"rows": [first_row + self.index + 1, first_row + self.index + 2],
                "t_before_s": self.t_before, "t_after_s": self.t_after,
                "length_s": self.length_s, "same_state": self.same_state}


def find_gaps(t: np.ndarray, on: np.ndarray, factor: float = GAP_FACTOR) -> tuple[Gap, ...]:
    """The gaps of a record (times ``t`` in s, strictly increasing; pump states ``on``)."""
    t = np.asarray(t, dtype=float)
    if len(t) < 3:
        return ()
    step = np.diff(t)
    dt = float(np.median(step))
    idx = np.flatnonzero(step > factor * dt)
    return tuple(Gap(int(i), float(t[i]), float(t[i + 1]), bool(on[i] == on[i + 1]))
                 for i in idx)


def spanning(gaps: tuple[Gap, ...], seg_start: np.ndarray, seg_stop: np.ndarray,
             w_row: np.ndarray, w_col: np.ndarray, n: int) -> np.ndarray:
    """Per cycle difference (``n`` of one record): True where its segments contain a gap.

    ``seg_start``/``seg_stop`` are the segments' reading indices [start, stop); ``w_row``,
    ``w_col`` the non-zero entries of the record's weight matrix (difference, segment).
    """
    out = np.zeros(n, dtype=bool)
    if not gaps or n == 0:
        return out
    lo = np.full(n, np.iinfo(np.int64).max)
    hi = np.full(n, -1)
    np.minimum.at(lo, w_row, seg_start[w_col])
    np.maximum.at(hi, w_row, seg_stop[w_col] - 1)       # last reading of the last segment
    for g in gaps:
        out |= (lo <= g.index) & (g.index + 1 <= hi)
    return out
