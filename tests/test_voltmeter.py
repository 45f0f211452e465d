"""Tests of the ``voltmeter`` input module.

References: synthetic Josephson calibration tables with a known gain (fixed seeds);
scipy.optimize.curve_fit as an independent least-squares implementation; JCGM 100 F.2.2.1
(resolution δx: half a digit, rectangular, u = δx/√12) and 4.3.7 (bound a → u = a/√3);
u(1/G) = u(G)/G² (first-order propagation, JCGM 100 eq. 10).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from numeric import near
from scipy import optimize

from budget.errors import BudgetError, DataError, SpecError
from budget.inputs import InputContext, run_module

G_TRUE = 1 + 3.0e-7        # reading/reference (invented truth)
OFFSET = 2.0e-7            # V (invented)
NOISE = 5.0e-8             # V (invented)


def write(folder, *, seed=0, n=21, noise=NOISE, text=None):
    if text is None:
        rng = np.random.default_rng(seed)
        ref = np.linspace(-10, 10, n)
        rd = G_TRUE * ref + OFFSET + rng.normal(0, noise, n)
        text = "reference_V,reading_V\n" + "".join(f"{float(a)!r},{float(b)!r}\n"
                                                   for a, b in zip(ref, rd))
    (Path(folder) / "cal.csv").write_text(text)


def ctx(folder, **table):
    t = {"module": "voltmeter", **table}
    return InputContext(name="g", table=t, folder=Path(folder), spec_file="spec.toml")


def test_gain_from_table_with_offset(tmp_path):
    write(tmp_path, seed=1)
    r = run_module(ctx(tmp_path, file="cal.csv", linearity=0.0))
    (q,) = [q for q in r.quantities if q.name == "g_cal"]
    data = np.loadtxt(tmp_path / "cal.csv", delimiter=",", skiprows=1)
    # scipy curve_fit, unweighted (covariance scaled by the residual variance)
    popt, pcov = optimize.curve_fit(lambda x, b, G: b + G * x, data[:, 0], data[:, 1])
    big_g, u_big_g = popt[1], math.sqrt(pcov[1, 1])
    assert q.value == near(1 / big_g, rel=1e-13)
    assert q.standard_uncertainty == near(u_big_g / big_g ** 2, rel=1e-5)
    assert q.dof == 21 - 2 and q.evaluation == "A"
    # synthetic truth: g = 1/G_true within 3u
    assert abs(q.value - 1 / G_TRUE) < 3 * q.standard_uncertainty


def test_fit_through_origin_is_biased_by_an_offset_the_default_is_not(tmp_path):
    # large offset, symmetric references: the origin fit still finds the slope here (the
    # offset averages out), but with only positive references it is pulled away
    rng = np.random.default_rng(5)
    ref = np.linspace(1, 10, 10)
    rd = G_TRUE * ref + 1e-5 + rng.normal(0, NOISE, ref.size)
    write(tmp_path, text="reference_V,reading_V\n"
                         + "".join(f"{float(a)!r},{float(b)!r}\n" for a, b in zip(ref, rd)))
    off = run_module(ctx(tmp_path, file="cal.csv", linearity=0.0)).quantities[0]
    org = run_module(ctx(tmp_path, file="cal.csv", fit="origin", linearity=0.0)).quantities[0]
    assert abs(off.value - 1 / G_TRUE) < 3 * off.standard_uncertainty
    assert abs(org.value - 1 / G_TRUE) > 3 * org.standard_uncertainty
    popt, _ = optimize.curve_fit(lambda x, G: G * x, ref, rd)    # independent origin fit
    assert org.value == near(1 / popt[0], rel=1e-12)
    assert org.dof == 10 - 1


def test_linearity_from_fit_and_resolution(tmp_path):
    write(tmp_path, seed=2)
    r = run_module(ctx(tmp_path, file="cal.csv", working_voltage_V=0.16, resolution_V=1e-8))
    assert [q.name for q in r.quantities] == ["g_cal", "g_lin", "g_res"]
    assert r.expression == "g_cal * (1 + g_lin) * (1 + g_res)"
    lin, res = r.quantities[1], r.quantities[2]
    max_res = r.diagnostics["calibration"]["max_abs_residual_V"]
    assert lin.distribution.half_width == near(max_res / 0.16)
    # the table (±10 V in 1 V steps) has no point within a factor 2 of 0.16 V: the whole
    # table's largest residual is used, and said so
    assert r.diagnostics["calibration"]["linearity_points"] == 0
    (w,) = [w for w in lin.provenance.warnings if w.code == "voltmeter.linearity_range"]
    assert "0 calibration point(s) within a factor 2" in w.message
    assert lin.standard_uncertainty == near(max_res / 0.16 / math.sqrt(3))  # a/√3
    # JCGM 100 F.2.2.1: resolution δx → u = δx/√12, here relative to the working voltage
    assert res.standard_uncertainty == near(1e-8 / math.sqrt(12) / 0.16)
    (fig,) = r.diagnostics["figures"]
    assert len(fig["series"][0]["x"]) == 21
    json.dumps(r.diagnostics, allow_nan=False)


def test_certificate_values(tmp_path):
    r = run_module(ctx(tmp_path, gain=1.00000012, gain_expanded_uncertainty=4e-8,
                       gain_coverage_factor=2.0, gain_dof=30, linearity=5e-8))
    cal, lin = r.quantities
    assert cal.value == 1.00000012 and cal.standard_uncertainty == near(2e-8)  # U/k
    assert cal.dof == 30 and cal.distribution.kind == "student-t"
    assert lin.distribution.kind == "rectangular"
    (q,) = run_module(ctx(tmp_path, gain=1.0000003, gain_is="reading-ratio",
                          gain_uncertainty=1e-8)).quantities
    # g = 1/G, u(g) = u(G)/G²
    assert q.name == "g" and q.value == near(1 / 1.0000003, rel=1e-15)
    assert q.standard_uncertainty == near(1e-8 / 1.0000003 ** 2, rel=1e-12)
    assert math.isinf(q.dof)


def test_stability_per_day(tmp_path):
    r = run_module(ctx(tmp_path, gain=1.0, gain_uncertainty=1e-8, stability_per_day=1e-10,
                       calibration_date="2026-01-01", at="2026-03-02"))
    stab = r.quantities[1]
    assert stab.distribution.half_width == near(1e-10 * 60)   # 60 days × rate
    assert stab.distribution.kind == "rectangular"


@pytest.mark.parametrize("table, field", [
    ({"gain": 1.0, "gain_uncertainty": 1e-8, "file": "cal.csv"}, "inputs.g.file"),
    ({}, "inputs.g.file"),
    ({"file": "cal.csv"}, "inputs.g.working_voltage_V"),           # from-fit needs it
    ({"gain": 1.0, "gain_uncertainty": 1e-8, "linearity": "from-fit"}, "inputs.g.linearity"),
    ({"gain": 1.0, "gain_uncertainty": 1e-8, "linearity": "big"}, "inputs.g.linearity"),
    ({"gain": 1.0}, "inputs.g.gain_expanded_uncertainty"),
    ({"gain": 1.0, "gain_uncertainty": 1e-8, "resolution_V": 1e-8},
     "inputs.g.working_voltage_V"),
    ({"gain": 1.0, "gain_uncertainty": 1e-8, "stability": 1e-8, "stability_per_day": 1e-9},
     "inputs.g.stability_per_day"),
    ({"gain": 1.0, "gain_uncertainty": 1e-8, "stability_per_day": 1e-9,
      "calibration_date": "2026-02-01", "at": "2026-01-01"}, "inputs.g.at"),
    ({"gain": 1.0, "gain_uncertainty": 1e-8, "fit": "origin"}, "inputs.g.fit"),
    ({"gain": -1.0, "gain_uncertainty": 1e-8}, "inputs.g.gain"),
    # 1/G overflows float64 (largest ≈ 1.8e308, IEEE 754) for this subnormal G
    ({"gain": 1e-320, "gain_uncertainty": 1e-8, "gain_is": "reading-ratio"}, "inputs.g.gain"),
])
def test_bad_options(tmp_path, table, field):
    write(tmp_path)
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, **table))
    assert e.value.field == field, e.value.one_line()


@pytest.mark.parametrize("text, row, col", [
    ("reference_V,reading\n1,1\n", None, "reading"),
    ("reference_V,reading_V\n1,1\n2,x\n3,3\n", 2, "reading_V"),
    ("reference_V,reading_V\n1,1\nnan,2\n3,3\n", 2, "reference_V"),
    ("reference_V,reading_V,reading_uncertainty_V\n1,1,1e-8\n2,2,-1e-8\n3,3,1e-8\n", 2,
     "reading_uncertainty_V"),
    # a surplus field would make pandas shift the row's values one column left
    ("reference_V,reading_V\n1,1\n2,2,7\n3,3\n", 2, None),
])
def test_bad_table(tmp_path, text, row, col):
    write(tmp_path, text=text)
    with pytest.raises(DataError) as e:
        run_module(ctx(tmp_path, file="cal.csv", linearity=0.0))
    assert (e.value.row, e.value.field) == (row, col)
    assert e.value.file.endswith("cal.csv")


def test_too_few_points_located(tmp_path):
    write(tmp_path, text="reference_V,reading_V\n1,1\n2,2\n")
    with pytest.raises(BudgetError, match="too few") as e:   # unweighted line: n ≥ 3
        run_module(ctx(tmp_path, file="cal.csv", linearity=0.0))
    assert e.value.file.endswith("cal.csv")


def test_linearity_from_the_points_near_the_working_voltage(tmp_path):
    # a cubic nonlinearity c·V³ (invented, c = 2e-9 V⁻²) is largest at the ends of a ±10 V
    # table; at V_w = 1 V it is the points with 0.5 V ≤ |V_ref| ≤ 2 V (factor 2, the default)
    # that bound it. Residuals of the straight-line fit from numpy.polyfit (an independent
    # least-squares implementation); no noise, so they are the nonlinearity itself.
    ref = np.linspace(-10, 10, 41)                     # 0.5 V steps
    rd = G_TRUE * ref + OFFSET + 2e-9 * ref ** 3
    write(tmp_path, text="reference_V,reading_V\n" + "".join(
        f"{float(a)!r},{float(b)!r}\n" for a, b in zip(ref, rd)))
    slope, icpt = np.polyfit(ref, rd, 1)
    resid = rd - (slope * ref + icpt)
    near_wv = (np.abs(ref) >= 0.5) & (np.abs(ref) <= 2.0)
    assert near_wv.sum() == 8                          # ±0.5, ±1, ±1.5, ±2 V
    r = run_module(ctx(tmp_path, file="cal.csv", working_voltage_V=1.0))
    lin = r.quantities[1]
    assert lin.name == "g_lin" and not lin.provenance.warnings
    assert lin.distribution.half_width == near(np.max(np.abs(resid[near_wv])), rel=1e-6)
    # the former rule (largest residual anywhere / V_w) would be several times larger
    assert np.max(np.abs(resid)) > 3 * np.max(np.abs(resid[near_wv]))
    assert r.diagnostics["calibration"]["linearity_points"] == 8
    # a wider neighbourhood takes in more of the range: factor 5 → 0.2 V ≤ |V| ≤ 5 V
    wide = run_module(ctx(tmp_path, file="cal.csv", working_voltage_V=1.0, linearity_factor=5))
    sel = (np.abs(ref) >= 0.2) & (np.abs(ref) <= 5.0)
    assert wide.quantities[1].distribution.half_width == near(np.max(np.abs(resid[sel])),
                                                              rel=1e-6)
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, file="cal.csv", working_voltage_V=1.0, linearity_factor=1.0))
    assert e.value.field == "inputs.g.linearity_factor"
