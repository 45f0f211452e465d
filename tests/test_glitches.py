"""Glitch screen of the ``cycles`` module (budget/inputs/glitches.py).

References: the robust scale σ_MAD = 1.4826·MAD with 1.4826 = 1/Φ⁻¹(3/4) (derivation, checked
against scipy.stats.norm); MAD-based outlier screening is common practice (NIST/SEMATECH
e-Handbook §1.3.5.17, memory); the limit 5 σ_MAD flags a normal value with probability
2·Φ(−5) = 5.7·10⁻⁷ (derivation, checked against scipy). The records are invented
(tests/test_settling.py's first-order chain) with a glitch added where the truth is known.
"""

from __future__ import annotations

import numpy as np
import pytest
from numeric import near
from scipy import stats
from test_settling import STEP, chain, cycles_diag, run, write

from budget.inputs import glitches


def test_mad_factor_and_false_flag_rate():
    assert glitches.MAD_FACTOR == near(1 / stats.norm.ppf(0.75), abs=5e-5)
    assert 2 * stats.norm.sf(5) == near(5.733e-7, abs=1e-10)
    # normal sample: σ_MAD estimates σ (consistency), no flags at 5 σ among 10⁴ values
    x = np.random.default_rng(1).normal(0.0, 2.0, 10_000)
    s = glitches.screen(x)
    assert s.sigma_mad == near(2.0, abs=0.06)            # se of σ_MAD ≈ 1.17·σ/√n·... ≈ 0.03
    assert not s.flagged.any()


@pytest.fixture(scope="module")
def glitched():
    t, y, on = chain(np.random.default_rng(2027), 100)
    # a 40 s glitch of 2e-7 V (10 × the reading noise) inside on segment 37: rows of the
    # segment that starts at 73·120 s (segment index 73 is on: odd index)
    start = 73 * 120.0
    y = y.copy()
    y[(t >= start + 70) & (t < start + 110)] += 2e-7
    return t, y, on, start


def test_glitch_is_flagged_not_rejected(tmp_path, capsys, glitched):
    t, y, on, start = glitched
    rc, rec, err = run(write(tmp_path, t, y, on, settle_s=60), capsys)
    assert rc == 0
    g = cycles_diag(rec)["glitches"]
    assert g["flagged"] == 1
    (c,) = g["cycles"]
    assert c["cycle"] == 37 and start <= c["time_s"] <= start + 120
    assert c["sigma_distance"] > 9
    assert cycles_diag(rec)["cycles_rejected"] == 0          # no rejection by default
    assert "cycles.glitch" in err and "cycle 37" in err and 'rejection = "mad"' in err
    # the effect of rejecting it: u and the mean without it (the truth is STEP exactly)
    alt = g["if_rejected"]
    mean = cycles_diag(rec)["mean_difference"]
    assert abs(alt["mean_difference"] - STEP) < abs(mean - STEP)
    assert alt["u"] < cycles_diag(rec)["u"]


def test_mad_rejection_removes_it(tmp_path, capsys, glitched):
    t, y, on, _ = glitched
    rc, rec, err = run(write(tmp_path, t, y, on, settle_s=60, rejection="mad"), capsys)
    assert rc == 0
    d = cycles_diag(rec)
    assert d["cycles_rejected"] == 1 and d["glitches"]["if_rejected"] is None
    assert "cycles.glitch" not in err and "cycles.rejected" in err
    m = rec["measurands"][0]
    assert abs(m["value"]) <= m["expanded_uncertainty"]


def test_default_settle_is_not_fooled_by_the_glitch(tmp_path, capsys, glitched):
    t, y, on, _ = glitched
    rc, rec, err = run(write(tmp_path, t, y, on), capsys)
    assert rc == 0
    s = cycles_diag(rec)["settling"][0]
    # same chain as tests/test_settling.py (τ = 3 s): the derived time stays near 45 s
    assert 38 <= s["settle_s"] <= 50, s["choice"]


def test_glitch_warning_states_the_effect_on_U(tmp_path, capsys, glitched):
    # budget/cross_checks.py propagates once more with the cycles input replaced by its
    # value, u and ν without the flagged cycle. The model dev = (dV/STEP − 1)·10⁶ has one
    # input, so by hand (GUM §6.2, G.3; JCGM 100 G.6.4 ν truncated, the spec's default):
    # U = t_0.975(⌊ν⌋)·u·10⁶/STEP and dev = (mean/STEP − 1)·10⁶ (scipy.stats.t).
    t, y, on, _ = glitched
    rc, rec, err = run(write(tmp_path, t, y, on, settle_s=60), capsys)
    assert rc == 0
    (w,) = [w for w in rec["warnings"] if w["code"] == "cycles.glitch"]
    alt = cycles_diag(rec)["glitches"]["if_rejected"]
    m = rec["measurands"][0]
    k = stats.t.ppf(0.975, np.floor(alt["dof"]))
    u_without = k * alt["u_si"] / STEP * 1e6
    dev_without = (alt["value_si"] / STEP - 1) * 1e6
    assert alt["value_si"] == near(alt["mean_difference"], rel=1e-15)     # readings in V
    assert (f"with U = {m['expanded_uncertainty']:.2g}" in w["message"]
            and f"with U = {u_without:.2g}" in w["message"])
    assert f"{dev_without:.6g} with U" in w["message"] and "without them" in w["message"]
    assert "effect on the result" in err
    # the glitch spreads the differences: U with it is larger (issue 12: 0.73 → 4.8·10⁻⁶)
    assert m["expanded_uncertainty"] > 2 * u_without


def test_on_segment_glitch_is_placed_in_its_segment(tmp_path, capsys, glitched):
    t, y, on, start = glitched
    rc, rec, err = run(write(tmp_path, t, y, on, settle_s=60), capsys)
    (c,) = cycles_diag(rec)["glitches"]["cycles"]
    seg = c["outlier_segment"]
    # segment 73 (on) holds readings 73·120 … 74·120 − 1 (1 s sampling from t = 0): rows
    # 8761-8880 (1-based data rows); the glitch covers start + 70 … start + 109 s
    assert seg["state"] == "on" and seg["rows"] == "8761-8880" == c["rows"]
    assert start + 70 <= seg["peak_time_s"] < start + 110
    assert "outlier in the on segment r.csv rows 8761-8880" in err


def test_off_segment_glitch_names_the_off_segment(tmp_path, capsys):
    # the truth: a 40 s glitch of 2e-7 V inside off segment 74 (even index: off), which the
    # linear estimator shares between cycles 37 (on segment 73) and 38 (on segment 75)
    t, y, on = chain(np.random.default_rng(2028), 100)
    start = 74 * 120.0
    y = y.copy()
    y[(t >= start + 70) & (t < start + 110)] += 2e-7
    rc, rec, err = run(write(tmp_path, t, y, on, settle_s=60), capsys)
    assert rc == 0
    cyc = cycles_diag(rec)["glitches"]["cycles"]
    assert [c["cycle"] for c in cyc] == [37, 38]
    for c in cyc:
        seg = c["outlier_segment"]
        # rows of segment 74: 74·120 + 1 … 75·120 (1-based), times 8880 … 8999 s
        assert seg["state"] == "off" and seg["rows"] == "8881-9000"
        assert seg["time_s"] == [8880.0, 8999.0]
        assert start + 70 <= seg["peak_time_s"] < start + 110
    assert "outlier in the off segment r.csv rows 8881-9000 (8880-8999 s" in err
    assert "cycle 37 (r.csv rows 8761-8880" in err and "cycle 38 (r.csv rows 9001-9120" in err


def test_segment_scores_synthetic_truth():
    # alternating states, flat levels 0 (off) and 1 (on) with a little scatter; one off
    # segment raised by 50 σ: it scores highest, its same-state neighbours about half of it
    rng = np.random.default_rng(5)
    n = 40
    on = np.arange(n) % 2 == 1
    mean = on.astype(float) + 0.01 * rng.normal(size=n)
    mean[20] += 0.5
    s = glitches.segment_scores(mean, np.arange(n) * 10.0, on)
    assert int(np.argmax(s)) == 20
    assert s[18] < s[20] and s[22] < s[20]
    assert s[18] > 5 and s[22] > 5          # ±½ of the step (derivation: r_(j±2) = −0.25)


def test_effect_is_stated_unknown_when_the_model_fails_without_them(tmp_path, capsys, glitched):
    # A model defined only above a threshold c: y = sqrt(dV − c). With c between the mean
    # without the flagged cycle and the mean with it (the glitch raises an on segment, so
    # the mean with it is larger), y is defined at the budget's estimate but sqrt of a
    # negative number without it (derivation): the second propagation must fail, and the
    # warning must say that the effect is unknown and why instead of dropping it.
    t, y, on, _ = glitched
    rc, rec, _ = run(write(tmp_path, t, y, on, settle_s=60), capsys)
    assert rc == 0
    with_it = cycles_diag(rec)["mean_difference"]
    without = cycles_diag(rec)["glitches"]["if_rejected"]["mean_difference"]
    assert without < with_it
    c = (with_it + without) / 2
    spec = tmp_path / "spec.toml"
    text = spec.read_text(encoding="utf-8")
    text = text.replace(f'dev = "(dV / {STEP!r} - 1) * 1e6"', f'y = "sqrt(dV - {c!r})"')
    text = text.replace("[monte_carlo]\n", "[monte_carlo]\nenabled = false\n")
    spec.write_text(text, encoding="utf-8")
    rc, rec, err = run(spec, capsys)
    assert rc == 0
    (w,) = [w for w in rec["warnings"] if w["code"] == "cycles.glitch"]
    assert "effect on the result and its U NOT computed" in w["message"]
    assert "propagated without them failed" in w["message"] and "non-finite" in w["message"]
    assert "effect on the result: y =" not in w["message"]
    assert "NOT computed" in err                      # on the terminal too


def test_effect_is_stated_unknown_when_too_few_cycles_remain(tmp_path, capsys):
    # rejection_limit = 1e-6: |d − median| > 1e-6·σ_MAD holds for every difference but the
    # median one of an odd count of continuous values (derivation), so one cycle would remain
    # and no Type A result exists without the flagged ones (n ≥ 2 is needed for s).
    t, y, on = chain(np.random.default_rng(2029), 11)
    rc, rec, err = run(write(tmp_path, t, y, on, settle_s=60, rejection_limit=1e-6), capsys)
    assert rc == 0
    g = cycles_diag(rec)["glitches"]
    n = cycles_diag(rec)["cycles_used"]
    assert n % 2 == 1 and g["flagged"] == n - 1
    assert g["if_rejected"] is None
    assert "only 1 cycle difference(s) would remain" in g["if_rejected_unavailable"]
    (w,) = [w for w in rec["warnings"] if w["code"] == "cycles.glitch"]
    assert "cannot be stated (only 1 cycle difference(s) would remain" in w["message"]
    assert "unknown" in w["message"] and "cycles.glitch" in err


def test_screen_blind_when_most_differences_are_equal(tmp_path, capsys):
    # Noise-free readings (levels exactly 0 and 1 mV, invented): every cycle difference is
    # the same float except the glitched one, so the median absolute deviation is 0 and no
    # distance can be formed (σ_MAD = 0, derivation) — the screen must say it is blind rather
    # than pass the glitch silently.
    t = np.arange(0, 21 * 120.0)
    on = (t // 120).astype(int) % 2 == 1
    y = np.where(on, 1e-3, 0.0)
    start = 9 * 120.0                                     # on segment 9 (odd index: on)
    y[(t >= start + 70) & (t < start + 110)] += 2e-7
    rc, rec, err = run(write(tmp_path, t, y, on, settle_s=10), capsys)
    assert rc == 0
    g = cycles_diag(rec)["glitches"]
    assert g["sigma_mad"] == 0 and g["flagged"] == 0
    (w,) = [w for w in rec["warnings"] if w["code"] == "cycles.glitch_screen_blind"]
    assert "1 difference(s) depart from the median" in w["message"]
    assert "none is flagged" in w["message"] and "cycles.glitch_screen_blind" in err
