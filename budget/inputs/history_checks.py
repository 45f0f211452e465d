"""Cross-checks of a calibration history: a prediction past the last calibration.

* ``history.extrapolation`` (warning): the prediction date is after the last calibration (or
  comparison). It is of severity ``"error"`` when the prediction lies further past the last
  calibration than :data:`FAR_SPAN` (1) times the history's span (first to last date) or
  :data:`FAR_INTERVALS` (3) calibration intervals (project convention: beyond its own span the
  drift line's slope is used further than the range it was fitted on, so u(R_cal) then rests
  on the straight-line assumption itself, which no data check; beyond three intervals three
  recalibrations were missed). ``budget sign`` refuses it without ``--accept-warnings``.
* ``history.past_interval`` (warning): further past than one calibration interval (issue 12
  item 4).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..warnings import Warning, warn
from .context import InputContext

__all__ = ["INTERVAL_KEYS", "FAR_SPAN", "FAR_INTERVALS", "extrapolation", "past_interval"]

INTERVAL_KEYS = frozenset({"calibration_interval_days"})
#: Extrapolation beyond this many times the history's span is an error (project convention).
FAR_SPAN = 1.0
#: Extrapolation beyond this many calibration intervals is an error (project convention).
FAR_INTERVALS = 3.0


def _interval(ctx: InputContext, dates: pd.DatetimeIndex, event: str
              ) -> tuple[float | None, str]:
    """The calibration interval, days, and where it came from (see :func:`past_interval`)."""
    interval = ctx.number("calibration_interval_days", None, positive=True)
    source = "calibration_interval_days"
    if interval is None and len(dates) >= 2 and event == "calibration":
        gaps = np.diff(np.sort(np.asarray(dates.values))) / np.timedelta64(1, "D")
        interval = float(np.median(gaps))
        source = f"the median spacing of the {event}s; calibration_interval_days not given"
    return interval, source


def extrapolation(ctx: InputContext, dates: pd.DatetimeIndex, at: pd.Timestamp, past: float,
                  event: str, notes: list[str], ws: list[Warning]) -> None:
    """Append the note and the warning ``history.extrapolation`` (an error when far, see the
    module docstring) and then :func:`past_interval`, for a prediction ``past`` days (> 0)
    after the last ``event``."""
    last = dates.max()
    span = float((last - dates.min()) / pd.Timedelta(days=1))
    interval, source = _interval(ctx, dates, event)
    notes.append(f"prediction at {at.isoformat()} extrapolates the drift line {past:.1f} "
                 f"days past the last {event} ({last.date().isoformat()})")
    far = []
    if past > FAR_SPAN * span:
        far.append(f"further than the history's own span of {span:.1f} days (first to last "
                   f"{event})")
    if interval is not None and past > FAR_INTERVALS * interval:
        far.append(f"more than {FAR_INTERVALS:g} {event} intervals of {interval:.1f} days "
                   f"({source})")
    if far:
        ws.append(warn("history.extrapolation", notes[-1] + ": " + " and ".join(far)
                       + "; the drift line is used far beyond what its data check, and its "
                       "u is no guide there — recalibrate, or check the date at",
                       severity="error"))
    else:
        ws.append(warn("history.extrapolation", notes[-1]))
    past_interval(ctx, dates, past, event, notes, ws)


def past_interval(ctx: InputContext, dates: pd.DatetimeIndex, past: float, event: str,
                  notes: list[str], ws: list[Warning]) -> None:
    """Append the note and the warning ``history.past_interval`` when ``past`` (days after the
    last ``event``) exceeds the interval.

    The interval is ``calibration_interval_days`` (days, > 0) when given; otherwise, for a
    calibration history, the median spacing of the calibration dates. A comparison history
    (frequency) is checked only against a stated interval.
    """
    interval, source = _interval(ctx, dates, event)
    if interval is None or past <= interval:
        return
    notes.append(f"the prediction is {past:.1f} days past the last {event}, longer than the {event} "
            f"interval of {interval:.1f} days ({source}): the drift line is used beyond the "
            "range a recalibration would have checked")
    ws.append(warn("history.past_interval", notes[-1]))
