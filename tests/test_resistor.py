"""Tests of the ``resistor`` input module.

References: synthetic calibration histories generated here with a fixed seed and a known truth
(recovery within the stated uncertainty); numpy.polyfit as an independent weighted
least-squares implementation; the formulas of JCGM 100 (eq. 10 for the temperature term,
4.3.7 for a rectangular bound, u = a/√3) as derivations beside each check.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from numeric import near

from budget.errors import DataError, SpecError
from budget.expression import compile_node, parse
from budget.inputs import InputContext, run_module

R0 = 1.0e9            # Ω, invented nominal of a 1 GΩ standard
DRIFT = 0.12e-6       # relative drift per year (invented truth)
U_REL = 0.05e-6       # relative standard uncertainty of each calibration (invented)
START = pd.Timestamp("2023-01-15")


def truth(ts: pd.Timestamp) -> float:
    return R0 * (1 + DRIFT * (ts - START).days / 365.25)


def write_history(folder: Path, *, seed=1, n=12, scatter=1.0, name="hist.csv", extra=None,
                  k=2.0) -> list[pd.Timestamp]:
    """A synthetic history: one calibration every ~91 days, values = truth + N(0, scatter·u)."""
    rng = np.random.default_rng(seed)
    dates = [START + pd.Timedelta(days=91 * i) for i in range(n)]
    u = U_REL * R0
    lines = ["date,value,expanded_uncertainty,coverage_factor" + (extra[0] if extra else "")]
    for i, d in enumerate(dates):
        v = truth(d) + rng.normal(0, scatter * u)
        lines.append(f"{d.date().isoformat()},{v!r},{k * u!r},{k}"
                     + (extra[1](i) if extra else ""))
    (folder / name).write_text("\n".join(lines) + "\n", encoding="utf-8")
    return dates


def ctx(folder, **table):
    return InputContext(name="R", table={"module": "resistor", "file": "hist.csv", **table},
                        folder=Path(folder), spec_file="spec.toml")


AT = "2026-02-01T14:00"


def test_single_row_without_corrections(tmp_path):
    write_history(tmp_path)
    r = run_module(ctx(tmp_path, at=AT))
    assert r.expression is None and len(r.quantities) == 1
    q = r.quantities[0]
    assert q.name == "R" and q.unit == "Ω"
    assert q.provenance.files[0].rows == "1-12"
    assert len(q.provenance.files[0].sha256) == 64


def test_recovers_truth_within_uncertainty(tmp_path):
    write_history(tmp_path, seed=3)
    q = run_module(ctx(tmp_path, at=AT)).quantities[0]
    # synthetic truth: the prediction lies within 3u (fails with probability ~0.3 %)
    assert abs(q.value - truth(pd.Timestamp(AT))) < 3 * q.standard_uncertainty


def test_consistent_scatter_keeps_stated_uncertainties(tmp_path):
    # scatter 0.3 of the stated u: χ² ≈ 0.09·χ²_10, far below the 5 % critical value 18.3
    # (scipy.stats.chi2.ppf(0.95, 10)), so no inflation; k = 2 stated for 95.45 % is the
    # normal quantile (JCGM 100 Table G.2, ν = ∞), so ν = ∞
    write_history(tmp_path, seed=3, scatter=0.3)
    r = run_module(ctx(tmp_path, at=AT, coverage_probability=0.9545))
    q = r.quantities[0]
    assert not r.diagnostics["inflated"]
    assert math.isinf(q.dof) and q.distribution.kind == "normal"
    assert r.diagnostics["fit"]["dof"] is None          # JSON form of ∞
    # at the default p = 95 % the same k = 2 implies ν_i ≈ 60 per calibration (t_0.975(60) =
    # 2.000, t tables, memory), and the prediction's ν (G.2b over the calibrations) is finite
    q95 = run_module(ctx(tmp_path, at=AT)).quantities[0]
    assert q95.dof > 60 and q95.distribution.kind == "student-t"


def test_coverage_over_many_seeds(tmp_path):
    # with correct uncertainties about 95 % of predictions lie within 2u (normal, k = 2);
    # 120 seeds: binomial sd ≈ 2 %, so the band 0.88..1.0 fails only for a real error
    hits = 0
    for seed in range(120):
        write_history(tmp_path, seed=seed)
        q = run_module(ctx(tmp_path, at=AT, inflate="never")).quantities[0]
        hits += abs(q.value - truth(pd.Timestamp(AT))) < 2 * q.standard_uncertainty
    assert hits / 120 >= 0.88


def test_matches_polyfit_weighted(tmp_path):
    dates = write_history(tmp_path, seed=4)
    df = pd.read_csv(tmp_path / "hist.csv")
    at = pd.Timestamp(AT)
    days = np.array([(d - at) / pd.Timedelta(days=1) for d in dates])
    u = (df.expanded_uncertainty / df.coverage_factor).to_numpy()
    # numpy.polyfit, w = 1/u, cov="unscaled": intercept at x = 0 (the measurement date)
    p, cov = np.polyfit(days, df.value.to_numpy(), 1, w=1 / u, cov="unscaled")
    r = run_module(ctx(tmp_path, at=AT, inflate="never"))
    q = r.quantities[0]
    assert q.value == near(p[1], rel=1e-13)
    assert q.standard_uncertainty == near(math.sqrt(cov[1, 1]), rel=1e-8)
    d = r.diagnostics
    assert d["drift_per_year"] == near(p[0] * 365.25, rel=1e-8)
    # synthetic truth: drift per year R0·DRIFT within 3 of its standard uncertainties
    assert abs(d["drift_per_year"] - R0 * DRIFT) < 3 * d["drift_per_year_uncertainty"]


def test_constant_drift_is_weighted_mean(tmp_path):
    write_history(tmp_path, seed=5)
    df = pd.read_csv(tmp_path / "hist.csv")
    w = (df.coverage_factor / df.expanded_uncertainty).to_numpy() ** 2
    q = run_module(ctx(tmp_path, at=AT, drift="constant", inflate="never")).quantities[0]
    assert q.value == near(np.average(df.value, weights=w), rel=1e-14)  # Σwx/Σw
    assert q.standard_uncertainty == near(w.sum() ** -0.5, rel=1e-12)    # (Σw)^-1/2


def test_inflation_when_scatter_exceeds_stated(tmp_path):
    write_history(tmp_path, seed=6, scatter=4.0)   # true scatter four times the stated u
    r = run_module(ctx(tmp_path, at=AT))
    q = r.quantities[0]
    d = r.diagnostics
    # scatter 4u: R_B² = 16·χ²_10/10 (12 calibrations, 2 parameters), so R_B ≤ 1.5 needs
    # χ²_10 ≤ 1.41, probability 8e-4 (scipy.stats.chi2.cdf): > 1.5 fails only for a real error
    assert d["inflated"] and d["birge_ratio"] > 1.5
    assert q.dof == 12 - 2                          # n − p
    assert q.distribution.kind == "student-t"
    assert any("exceeds" in n for n in q.provenance.notes)
    plain = run_module(ctx(tmp_path, at=AT, inflate="never")).quantities[0]
    assert q.standard_uncertainty == near(plain.standard_uncertainty
                                                   * d["birge_ratio"], rel=1e-10)
    # recovered within the (inflated) uncertainty; Student t with 10 dof, 3u ≈ 99 %
    assert abs(q.value - truth(pd.Timestamp(AT))) < 3 * q.standard_uncertainty


def test_extrapolation_flagged_in_days(tmp_path):
    dates = write_history(tmp_path)
    r = run_module(ctx(tmp_path, at=AT))
    days = (pd.Timestamp(AT) - dates[-1]) / pd.Timedelta(days=1)
    assert r.diagnostics["days_since_last_calibration"] == near(days)
    assert r.diagnostics["extrapolated"]
    assert any(f"{days:.1f} days past the last calibration" in n
               for n in r.quantities[0].provenance.notes)
    inside = run_module(ctx(tmp_path, at="2024-06-01"))
    assert not inside.diagnostics["extrapolated"]
    assert not any("past the last" in n for n in inside.quantities[0].provenance.notes)


def test_temperature_and_voltage_rows(tmp_path):
    write_history(tmp_path)
    alpha, beta, u_a = 2e-7, -3e-8, 5e-8        # /K, /K², /K (invented)
    r = run_module(ctx(tmp_path, at=AT, alpha=alpha, beta=beta, alpha_uncertainty=u_a,
                       reference_temperature_C=23.0, temperature_C=23.4,
                       temperature_uncertainty_C=0.05, voltage_coefficient=-1e-8,
                       voltage_coefficient_bound=2e-8, calibration_voltage_V=10.0,
                       working_voltage_V=0.1))
    names = [q.name for q in r.quantities]
    assert names == ["R_cal", "R_temp", "R_volt"]
    assert r.expression == "R_cal * (1 + R_temp) * (1 + R_volt)"
    q_t, q_v = r.quantities[1], r.quantities[2]
    dt = 0.4
    assert q_t.value == near(alpha * dt + beta * dt ** 2)   # δ_T = αΔT + βΔT²
    # JCGM 100 eq. 10 with ∂δ/∂T = α + 2βΔT, ∂δ/∂α = ΔT
    u_expected = math.hypot((alpha + 2 * beta * dt) * 0.05, dt * u_a)
    assert q_t.standard_uncertainty == near(u_expected, rel=1e-12)
    assert q_t.unit == "1" and q_t.distribution.kind == "normal"
    # δ_V = γ(V_work − V_cal); bound ±|ΔV|·γ_max, rectangular, u = a/√3 (JCGM 100 4.3.7)
    assert q_v.value == near(-1e-8 * (0.1 - 10.0))
    assert q_v.standard_uncertainty == near(9.9 * 2e-8 / math.sqrt(3))
    assert q_v.distribution.kind == "rectangular"
    # the expression evaluates (budget.expression) to the corrected resistance
    env = {q.name: q.value for q in r.quantities}
    val = compile_node(parse(r.expression))(env)
    assert val == near(env["R_cal"] * (1 + q_t.value) * (1 + q_v.value), rel=1e-15)


def test_rectangular_temperature_bound(tmp_path):
    write_history(tmp_path)
    r = run_module(ctx(tmp_path, at=AT, alpha=1e-6, reference_temperature_C=23.0,
                       temperature_C=23.0, temperature_half_width_C=0.1))
    q = r.quantities[1]
    assert q.distribution.kind == "rectangular"
    assert q.standard_uncertainty == near(1e-6 * 0.1 / math.sqrt(3))  # a/√3


def test_history_values_referred_to_reference_temperature(tmp_path):
    # calibrations at 24 °C of a resistor whose value at 23 °C follows the truth: with α the
    # fit must return the 23 °C value (derivation: R(T) = R_ref·(1 + αΔT))
    alpha = 1e-6
    rng = np.random.default_rng(8)
    dates = [START + pd.Timedelta(days=91 * i) for i in range(8)]
    u = U_REL * R0
    rows = ["date,value,expanded_uncertainty,coverage_factor,temperature_C"]
    for d in dates:
        rows.append(f"{d.date()},{truth(d) * (1 + alpha) + rng.normal(0, u)!r},{2 * u},2,24.0")
    (tmp_path / "hist.csv").write_text("\n".join(rows) + "\n")
    r = run_module(ctx(tmp_path, at=AT, alpha=alpha, reference_temperature_C=23.0,
                       temperature_C=23.0, temperature_uncertainty_C=0.01))
    q = r.quantities[0]
    assert abs(q.value - truth(pd.Timestamp(AT))) < 3 * q.standard_uncertainty
    assert any("referred to T_ref" in n for n in r.quantities[1].provenance.notes)


def test_diagnostics_and_figure_format(tmp_path):
    write_history(tmp_path)
    r = run_module(ctx(tmp_path, at=AT, nominal=R0))
    d = r.diagnostics
    json.dumps(d, allow_nan=False)                # plain JSON, no NaN/inf
    for key in ("fit", "birge_ratio", "drift_per_year", "days_since_last_calibration",
                "calibrations"):
        assert key in d
    (fig,) = d["figures"]
    assert {"id", "title", "xlabel", "ylabel", "xscale", "yscale", "series"} <= set(fig)
    styles = [s["style"] for s in fig["series"]]
    assert styles.count("points") == 2 and "band" in styles and "line" in styles
    for s in fig["series"]:
        assert len(s["x"]) == len(s["y"]) <= 400
        if s["style"] == "band":
            assert all(lo <= y <= hi for lo, y, hi in zip(s["y_low"], s["y"], s["y_high"]))
        if "yerr" in s:
            assert len(s["yerr"]) == len(s["y"])


def test_exclude_rows(tmp_path):
    write_history(tmp_path)
    r = run_module(ctx(tmp_path, at=AT, exclude_rows=[3, 5]))
    q = r.quantities[0]
    assert q.provenance.files[0].rows == "1-2, 4, 6-12"
    assert r.diagnostics["calibrations_used"] == 10
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, at=AT, exclude_rows=[13]))
    assert e.value.field == "inputs.R.exclude_rows"


# ---------------------------------------------------------------- bad input
def _bad(tmp_path, text):
    (tmp_path / "hist.csv").write_text(text, encoding="utf-8")
    with pytest.raises(DataError) as e:
        run_module(ctx(tmp_path, at=AT))
    return e.value


HEAD = "date,value,expanded_uncertainty,coverage_factor\n"
OK1 = "2024-01-01,1000000000.0,100,2\n"


def test_missing_column(tmp_path):
    e = _bad(tmp_path, "date,value,expanded_uncertainty\n2024-01-01,1e9,100\n")
    assert e.field == "coverage_factor" and e.file.endswith("hist.csv")


def test_misspelt_column(tmp_path):
    e = _bad(tmp_path, "date,value,expanded_uncertainty,coverage_factor,temperatur_C\n"
                       "2024-01-01,1e9,100,2,23\n")
    assert e.field == "temperatur_C" and "temperature_C" in e.message


def test_non_numeric_value(tmp_path):
    e = _bad(tmp_path, HEAD + OK1 + "2024-06-01,abc,100,2\n")
    assert (e.row, e.field) == (2, "value")


def test_nan_value(tmp_path):
    e = _bad(tmp_path, HEAD + OK1 + "2024-06-01,nan,100,2\n")
    assert (e.row, e.field) == (2, "value")


def test_unparseable_date(tmp_path):
    e = _bad(tmp_path, HEAD + OK1 + "2024-13-45,1e9,100,2\n")
    assert (e.row, e.field) == (2, "date")


def test_negative_uncertainty(tmp_path):
    e = _bad(tmp_path, HEAD + OK1 + "2024-06-01,1e9,-100,2\n")
    assert (e.row, e.field) == (2, "expanded_uncertainty")


@pytest.mark.parametrize("k", ["0", "-2"])
def test_nonpositive_coverage_factor(tmp_path, k):
    e = _bad(tmp_path, HEAD + OK1 + f"2024-06-01,1e9,100,{k}\n")
    assert (e.row, e.field) == (2, "coverage_factor")


def test_measurement_before_first_calibration(tmp_path):
    (tmp_path / "hist.csv").write_text(HEAD + "2024-06-01,1e9,100,2\n" + OK1)
    with pytest.raises(DataError) as e:
        run_module(ctx(tmp_path, at="2023-12-01"))
    assert (e.value.row, e.value.field) == (2, "date")   # row 2 holds the earliest date
    assert "before the first calibration" in e.value.message


def test_zero_resistance_is_refused(tmp_path):
    # the corrections are relative (R_cal·(1 + δ)) and the figure is in parts of R: a value of 0
    # has no relative scale, so it is a located data error rather than a division by zero
    # (issue 11 item 6: refused by row as soon as it is read, like a negative resistance)
    e = _bad(tmp_path, HEAD + "2024-01-01,0,100,2\n2024-06-01,0,100,2\n")
    assert (e.row, e.field) == (1, "value") and e.file.endswith("hist.csv") and "> 0" in e.message


def test_linear_drift_needs_two_dates(tmp_path):
    e = _bad(tmp_path, HEAD + OK1)
    assert e.field == "date" and "constant" in e.message


def test_bad_options(tmp_path):
    write_history(tmp_path)
    cases = [({"at": "not a date"}, "inputs.R.at"),
             ({"at": AT, "drift": "quadratic"}, "inputs.R.drift"),
             ({"at": AT, "alpha": 1e-6, "temperature_C": 23.0}, "inputs.R.temperature_uncertainty_C"),
             ({"at": AT, "alpha": 1e-6, "temperature_C": 23.0, "temperature_uncertainty_C": 0.1},
              "inputs.R.reference_temperature_C"),
             ({"at": AT, "working_voltage_V": 0.1}, "inputs.R.voltage_coefficient_uncertainty"),
             ({"at": AT, "voltage_coefficient_bound": 1e-8, "working_voltage_V": 0.1},
              "inputs.R.calibration_voltage_V"),
             ({"at": AT, "temperature_uncertainty_C": -1.0, "alpha": 1.0, "temperature_C": 1.0,
               "reference_temperature_C": 1.0}, "inputs.R.temperature_uncertainty_C"),
             ({}, "inputs.R.at")]
    for table, field in cases:
        with pytest.raises(SpecError) as e:
            run_module(ctx(tmp_path, **table))
        assert e.value.field == field, (table, e.value.one_line())


def test_unknown_key_did_you_mean(tmp_path):
    write_history(tmp_path)
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, at=AT, temperture_C=23.0))
    assert "temperature_C" in e.value.message


def test_at_accepts_toml_datetime(tmp_path):
    # TOML's unquoted local date-time loads as datetime.datetime (TOML 1.0 spec)
    import datetime
    write_history(tmp_path)
    a = run_module(ctx(tmp_path, at=datetime.datetime(2026, 2, 1, 14, 0))).quantities[0]
    b = run_module(ctx(tmp_path, at=AT)).quantities[0]
    assert a.value == b.value and a.standard_uncertainty == b.standard_uncertainty


def test_stability_bound_row_as_the_amplifier_has(tmp_path):
    # issue 12 item 5: the resistor gets the long-term stability / transport term; a bound a
    # gives a rectangular row about 0 with u = a/√3 (JCGM 100 4.3.7)
    write_history(tmp_path)
    r = run_module(ctx(tmp_path, at=AT, stability_bound=2e-8))
    assert [q.name for q in r.quantities] == ["R_cal", "R_stab"]
    assert r.expression == "R_cal * (1 + R_stab)"
    q = r.quantities[1]
    assert q.value == 0.0 and q.distribution.kind == "rectangular"
    assert q.standard_uncertainty == near(2e-8 / math.sqrt(3), rel=1e-12)
    assert r.diagnostics["stability"] == {"relative_half_width": near(2e-8, rel=1e-12)}
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, at=AT, stability_bound=1.5))
    assert e.value.field == "inputs.R.stability_bound"


def test_prediction_past_the_calibration_interval(tmp_path):
    # issue 12 item 4: write_history's 12 calibrations lie 91 days apart from 2023-01-15, so the
    # last is on 2025-10-13 (11·91 = 1001 days on) and AT is 111.6 days after it (calendar
    # arithmetic): beyond the inferred interval of 91 days, within a stated one of 365
    write_history(tmp_path)
    (q,) = run_module(ctx(tmp_path, at=AT)).quantities
    (w,) = [w for w in q.provenance.warnings if w.code == "history.past_interval"]
    assert "interval of 91.0 days" in w.message and "calibration_interval_days" in w.message
    (q,) = run_module(ctx(tmp_path, at=AT, calibration_interval_days=365)).quantities
    assert "history.past_interval" not in {w.code for w in q.provenance.warnings}
    (q,) = run_module(ctx(tmp_path, at=AT, calibration_interval_days=100)).quantities
    (w,) = [w for w in q.provenance.warnings if w.code == "history.past_interval"]
    assert "100.0 days (calibration_interval_days)" in w.message


def test_far_extrapolation_is_an_error(tmp_path):
    # write_history: 12 calibrations 91 days apart from 2023-01-15 (span 11·91 = 1001 days,
    # last 2025-10-13). The rule (budget/inputs/history_checks.py, project convention): an
    # error beyond FAR_SPAN = 1 span or FAR_INTERVALS = 3 intervals past the last calibration.
    from budget.inputs.history_checks import FAR_INTERVALS, FAR_SPAN
    assert (FAR_SPAN, FAR_INTERVALS) == (1.0, 3.0)
    write_history(tmp_path)

    def extrapolation(at, **kw):
        (q,) = run_module(ctx(tmp_path, at=at, **kw)).quantities
        (w,) = [w for w in q.provenance.warnings if w.code == "history.extrapolation"]
        return w

    # 111.6 days past (AT): past one interval, within three — a warning, as before
    assert extrapolation(AT).severity == "warning"
    # 2026-10-13 is 365 days past (> 3·91 = 273, < 1001): an error naming the intervals
    w = extrapolation("2026-10-13")
    assert w.severity == "error" and "more than 3 calibration intervals of 91.0 days" in w.message
    assert "span" not in w.message
    # a stated interval of 365 days: 3·365 = 1095 > 365 and 365 < 1001 — back to a warning
    assert extrapolation("2026-10-13", calibration_interval_days=365).severity == "warning"
    # ten years past (2035-10-13, 3652 days): beyond the span of 1001 days as well
    w = extrapolation("2035-10-13", calibration_interval_days=365)
    assert w.severity == "error" and "span of 1001.0 days" in w.message
