"""Cross-checks of a calibration history: a prediction further past the last calibration than
the calibration interval (issue 12 item 4)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..warnings import Warning, warn
from .context import InputContext

__all__ = ["INTERVAL_KEYS", "past_interval"]

INTERVAL_KEYS = frozenset({"calibration_interval_days"})


def past_interval(ctx: InputContext, dates: pd.DatetimeIndex, past: float, event: str,
                  notes: list[str], ws: list[Warning]) -> None:
    """Append the note and the warning ``history.past_interval`` when ``past`` (days after the
    last ``event``) exceeds the interval.

    The interval is ``calibration_interval_days`` (days, > 0) when given; otherwise, for a
    calibration history, the median spacing of the calibration dates. A comparison history
    (frequency) is checked only against a stated interval.
    """
    interval = ctx.number("calibration_interval_days", None, positive=True)
    source = "calibration_interval_days"
    if interval is None and len(dates) >= 2 and event == "calibration":
        gaps = np.diff(np.sort(np.asarray(dates.values))) / np.timedelta64(1, "D")
        interval = float(np.median(gaps))
        source = f"the median spacing of the {event}s; calibration_interval_days not given"
    if interval is None or past <= interval:
        return
    notes.append(f"the prediction is {past:.1f} days past the last {event}, longer than the {event} "
            f"interval of {interval:.1f} days ({source}): the drift line is used beyond the "
            "range a recalibration would have checked")
    ws.append(warn("history.past_interval", notes[-1]))
