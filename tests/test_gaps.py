"""Time gaps in an on/off record (budget/inputs/gaps.py, the cycles module).

Synthetic truth: the invented first-order chain of tests/test_settling.py (1 s sampling, 120 s
segments, true step STEP) with readings removed here, so where the gap is and which cycles
span it is known by construction. Threshold GAP_FACTOR = 5 median intervals (project
convention, stated in budget/inputs/gaps.py).
"""

from __future__ import annotations

import numpy as np
from test_settling import chain, cycles_diag, measurand, run, write

from budget.inputs import gaps


def test_gap_rule_and_jitter():
    t = np.arange(100.0)
    t[50:] += 3.0                                  # one interval of 4 s = 4·Δt: not a gap
    on = (np.arange(100) // 10) % 2 == 1
    assert gaps.find_gaps(t, on) == ()
    t[70:] += 5.0                                  # one interval of 6 s > 5·Δt: a gap
    (g,) = gaps.find_gaps(t, on)
    # readings 69 (off: 69 // 10 = 6 is even) and 70 (on): the gap falls on a switch
    assert g.index == 69 and g.length_s == 6.0 and not g.same_state
    assert g.to_dict()["rows"] == [70, 71]


def test_missing_off_segment_is_named_and_its_cycle_dropped(tmp_path, capsys):
    t, y, on = chain(np.random.default_rng(31), 60)
    # remove off segment 40 (even index: off), readings 40·120 … 41·120 − 1: on segments 39
    # and 41 merge into one on segment that spans the 121 s hole between the readings at
    # 4799 s and 4920 s (rows 4800 and 4801 of the written file)
    cut = (t >= 40 * 120) & (t < 41 * 120)
    t, y, on = t[~cut], y[~cut], on[~cut]
    rc, rec, err = run(write(tmp_path, t, y, on, settle_s=45), capsys)
    assert rc == 0
    (w,) = [w for w in rec["warnings"] if w["code"] == "cycles.time_gap"]
    assert "121 s between rows 4800 and 4801 (4799 s → 4920 s)" in w["message"]
    assert "a whole segment may be missing" in w["message"]
    d = cycles_diag(rec)["records"][0]
    assert d["time_gaps"][0]["rows"] == [4800, 4801] and d["cycles_across_gaps"] == 1
    assert "cycles.glitch" not in {x["code"] for x in rec["warnings"]}
    # the merged segment is not used: the result recovers the truth (dev = 0) within U
    m = measurand(rec)
    assert abs(m["value"]) <= m["expanded_uncertainty"]
    assert "[cycles.time_gap]" in err


def test_hour_hole_at_a_switch_is_reported(tmp_path, capsys):
    t, y, on = chain(np.random.default_rng(32), 60)
    t = t.copy()
    t[t >= 30 * 120] += 3600.0                     # one hour missing before segment 30 (off)
    rc, rec, err = run(write(tmp_path, t, y, on, settle_s=45), capsys)
    assert rc == 0
    (w,) = [w for w in rec["warnings"] if w["code"] == "cycles.time_gap"]
    assert "3601 s between rows 3600 and 3601" in w["message"]
    assert "may be missing" not in w["message"]             # on → off across it
    # on segment 29 would take its right off neighbour an hour later: that cycle is dropped
    assert cycles_diag(rec)["records"][0]["cycles_across_gaps"] == 1
    # white-noise check of the remaining estimate at 95 % (|x| ≤ U, GUM G.3)
    m = measurand(rec)
    assert abs(m["value"]) <= m["expanded_uncertainty"]
