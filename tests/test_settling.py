"""Settling diagnostic of the ``cycles`` module (budget/inputs/settling.py): step response, τ
fit, early/late test, data-derived settle time, warnings, ``settle_policy = "refuse"``.

The truth is known by construction: records are generated here through a first-order chain
y_i = a·y_(i−1) + (1 − a)·x_i, a = exp(−Δt/τ) (the discrete form of a single RC: after a step
the reading lags by step·a^(k+1) at sample k — derivation), with a linear offset drift and
white noise. The chain starts in the periodic steady state (two leading segments are
generated and dropped), so every segment sees the same transient.

Thresholds and their sources:
* Bias of a cycle difference left by a transient of amplitude A and time constant τ after
  settle time s in a segment of K kept readings: 2·A·Σ_k a^(k+1)/K ≈ 2·A·τ·e^(−s/τ)/K (both the
  on segment and its off neighbours are biased, in opposite directions — derivation). For
  τ = 3 s, 1 s sampling, 120 s segments and s = 24 s (the former default of 20 %) the
  discrete sum gives −17.7·10⁻⁶ of the step (the continuous form 2τe^(−8)/96 gives −21·10⁻⁶),
  some 60 times the record's u ≈ 0.3·10⁻⁶.
* "recovers the truth within U": |x − truth| ≤ U with k from the t distribution at 95 %
  (GUM G.3, JCGM 100); the bias left by the default is at most 0.1 u by construction
  (settling.py), so the check fails only at the 5 % level of the noise — the seeds are fixed.
* Early/late test level 1 % (settling.TRANSIENT_LEVEL); on white records its false-alarm rate
  must match the level (Welch's t is close to exact for ~60 segments per group; binomial
  bound at 3.1 σ, as in test_cycles.py).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from numeric import near
from scipy import signal

from budget import cli
from budget.inputs import settling

STEP = 1e-3          # V, true on − off step
SEG = 120.0          # s
TAU = 3.0            # s
DT = 1.0             # s


def chain(rng, cycles, *, seg=SEG, tau=TAU, white=2e-8, step=STEP, dt=DT):
    """An invented on/off record through a first-order chain (module docstring)."""
    n = int(round((2 * cycles + 3) * seg / dt))
    t = np.arange(n) * dt
    on = ((t // seg).astype(int) % 2 == 1)
    a = math.exp(-dt / tau)
    response = signal.lfilter([1 - a], [1, -a], on.astype(float))
    y = 2e-4 + 3e-9 * t + step * response + white * rng.normal(size=n)
    cut = int(round(2 * seg / dt))              # drop two segments: steady periodic state
    return t[cut:] - t[cut], y[cut:], on[cut:]


def write(folder: Path, t, y, on, **opts) -> Path:
    with open(folder / "r.csv", "w") as fh:
        fh.write("# invented record (tests/test_settling.py)\ntime_s,reading,pump\n")
        fh.writelines(f"{a:.3f},{b:.15g},{int(c)}\n" for a, b, c in zip(t, y, on))
    extra = "".join(f"{k} = {json.dumps(v)}\n" for k, v in opts.items())
    spec = f"""[budget]
title = "Settling test (invented record)"

[model]
dev = "(dV / {STEP!r} - 1) * 1e6"

[monte_carlo]
trials = 2000
seed = 1

[inputs.dV]
module = "cycles"
file = "r.csv"
{extra}"""
    (folder / "spec.toml").write_text(spec, encoding="utf-8")
    return folder / "spec.toml"


def run(spec: Path, capsys):
    out = spec.parent / "out.json"
    if out.exists():
        out.unlink()
    rc = cli.main(["run", str(spec), "--json", str(out)])
    o, e = capsys.readouterr()
    rec = json.loads(out.read_text()) if rc == 0 else None
    return rc, rec, e


def measurand(rec):
    (m,) = rec["measurands"]
    return m


def cycles_diag(rec):
    return rec["run"]["modules"]["dV"]["diagnostics"]


@pytest.fixture(scope="module")
def record():
    return chain(np.random.default_rng(2026), 100)


def test_former_default_was_biased_by_the_derived_amount(record):
    # 2·A·Σ_{k≥24} a^(k+1)/96 relative to the step, A = step (derivation in the docstring)
    t, y, on = record
    a = math.exp(-DT / TAU)
    kept = np.arange(24, 120)
    bias = -2 * np.sum(a ** (kept + 1)) / len(kept) * 1e6
    assert bias == near(-17.666, abs=0.001)          # 2·a²⁵/(1 − a)/96 (geometric sum)
    assert -2 * TAU * math.exp(-8) / 96 * 1e6 == near(-20.97, abs=0.01)   # continuous form
    seg = settling.onoff.segment(t, y, on, 24.0)
    d = settling.onoff.differences(seg, "linear")
    assert (d.d.mean() / STEP - 1) * 1e6 == near(bias, abs=1.0)   # u ≈ 0.3·10⁻⁶


def test_step_response_and_tau(record):
    t, y, on = record
    resp = settling.step_response(t, y, on)
    fit = settling.fit_exponential(resp)
    assert fit.status == "fits"
    assert fit.tau_s == near(TAU, abs=3 * fit.tau_u + 1e-3)
    # off→on: the reading starts low by step·a (first sample of the filter) → A ≈ −step·a
    assert fit.amplitude / STEP == near(-math.exp(-DT / TAU), abs=0.01)
    # 201 segments (off first and last); the first and last are not complete
    assert (resp.segments_off_on, resp.segments_on_off) == (100, 99)
    # opposite signs after the two kinds of switch; drift is the same for both
    assert resp.off_on[0] < 0 < resp.on_off[0]


def test_default_recovers_the_truth_and_reports_tau(tmp_path, capsys, record):
    rc, rec, err = run(write(tmp_path, *record), capsys)
    assert rc == 0
    m = measurand(rec)
    assert abs(m["value"]) <= m["expanded_uncertainty"], (m["value"], m["expanded_uncertainty"])
    s = cycles_diag(rec)["settling"][0]
    assert s["settle_source"] == "derived"
    # the bias falls below 0.1 u somewhere past 40 s: 2·3·e^(−s/3)/K·1e6 < 0.03 → s ≳ 42 s
    assert 38 <= s["settle_s"] <= 60
    assert s["fit"]["tau_s"] == near(TAU, abs=0.05)
    assert "cycles.default_settle" in err and f"{s['settle_s']:.4g} s" in err
    assert f"τ = {s['fit']['tau_s']:.3g} ± " in err           # the fitted τ on the terminal
    codes = {w["code"] for w in rec["warnings"]}
    assert "cycles.default_settle" in codes and "cycles.transient" not in codes
    assert any(f["id"] == "cycles-settling" for f in cycles_diag(rec)["figures"])


def test_short_settle_warns_with_a_better_time(tmp_path, capsys, record):
    rc, rec, err = run(write(tmp_path, *record, settle_s=10), capsys)
    assert rc == 0
    (w,) = [w for w in rec["warnings"] if w["code"] == "cycles.transient"]
    # tens of u left (test_former_default_…): at least settling.ERROR_RATIO u → "error"
    assert w["severity"] == "error" and "settle_s = 10 s" in w["message"]
    suggested = cycles_diag(rec)["settling"][0]["suggested_settle_s"]
    assert suggested >= 38 and f"settle_s = {suggested:.4g} s would remove it" in err
    # the number it warns about is wrong beyond its U
    m = measurand(rec)
    assert abs(m["value"]) > 10 * m["expanded_uncertainty"]


def test_refuse_policy_stops_the_run(tmp_path, capsys, record):
    spec = write(tmp_path, *record, settle_s=10, settle_policy="refuse")
    rc, rec, err = run(spec, capsys)
    assert rc == 2 and rec is None
    assert "settle_s" in err and "Traceback" not in err and not (tmp_path / "out.json").exists()


def test_enough_settle_is_quiet(tmp_path, capsys, record):
    rc, rec, err = run(write(tmp_path, *record, settle_s=60), capsys)
    assert rc == 0
    assert not [w for w in rec["warnings"] if w["code"].startswith("cycles.")]
    m = measurand(rec)
    assert abs(m["value"]) <= m["expanded_uncertainty"]


def test_white_records_false_alarm_rate_of_the_half_test():
    # no transient (τ ≪ Δt): p-values uniform, rejections at the 1 % level
    rng = np.random.default_rng(7)
    runs, hits = 400, 0
    for _ in range(runs):
        t, y, on = chain(rng, 60, seg=20.0, tau=0.01, white=1e-5)
        hits += settling.half_test(t, y, on, 2.0).detected
    p = settling.TRANSIENT_LEVEL
    assert hits / runs <= p + 3.1 * math.sqrt(p * (1 - p) / runs)


def test_no_transient_gives_the_floor(tmp_path, capsys):
    # floor = max(2 Δt, 5 % of 20 s) = 2 s (settling.floor_settle)
    t, y, on = chain(np.random.default_rng(3), 60, seg=20.0, tau=0.01, white=1e-5)
    rc, rec, err = run(write(tmp_path, t, y, on), capsys)
    assert rc == 0
    s = cycles_diag(rec)["settling"][0]
    assert s["settle_s"] == 2.0 and s["choice"]["by"] == "floor"


def test_half_test_is_welch_t_as_scipy_computes_it(record):
    # reference: scipy.stats.ttest_ind(equal_var=False) on the same e values
    from scipy import stats
    t, y, on = record
    h = settling.half_test(t, y, on, 30.0)
    seg = settling.onoff.segment(t, y, on, 30.0)
    e = []
    for j in range(1, seg.count - 1):
        v = y[seg.start[j]:seg.stop[j]][seg.keep[seg.start[j]:seg.stop[j]]]
        k = len(v) // 2
        e.append((seg.on[j], v[:k].mean() - v[len(v) - k:].mean()))
    a = [x for s, x in e if s]
    b = [x for s, x in e if not s]
    r = stats.ttest_ind(a, b, equal_var=False)
    assert h.statistic == near(float(r.statistic), rel=1e-9)
    assert h.p_value == near(float(r.pvalue), rel=1e-6)
    assert h.dof == near(float(r.df), rel=1e-9)
