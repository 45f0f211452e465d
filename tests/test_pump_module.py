"""Input module ``pump`` through InputContext: quantities, provenance, allowance row, bad input.

The contract checked is the project's own (budget/inputs/__init__.py, budget/quantity.py); the
physics is checked in test_pump_cascade.py and test_pump_escape.py. Data are synthetic,
generated here with fixed seeds from known parameters.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from numeric import near
from pump_sim import cascade_parts_decimal, escape_mean, escape_taus, staircase

from budget.errors import DataError, SpecError
from budget.inputs import InputContext, run_module
from budget.inputs.pump import KEYS

TRUTH = [300.0, -0.60, -0.60 + 20 / 300.0, -0.47]   # a (1/V), V_1..V_3 (V); δ_2 = 20


def scan(folder: Path, v=None, name="scan.csv", noise=1e-4, steps=TRUTH) -> Path:
    rng = np.random.default_rng(31)
    v = np.linspace(-0.64, -0.46, 181) if v is None else v
    y = staircase(v, steps[0], steps[1:]) + rng.normal(0, noise, v.size)
    f = folder / name
    f.write_text("# synthetic\ngate_voltage,n_mean,n_std\n" + "".join(
        f"{float(a)!r},{float(b)!r},{noise!r}\n" for a, b in zip(v, y)))
    return f


def ctx(folder: Path, **table) -> InputContext:
    return InputContext(name="delta_pump", table={"module": "pump", **table}, folder=folder,
                        spec_file="spec.toml")


BASE = {"file": "scan.csv", "model": "decay-cascade", "plateau": 1, "operating_point": -0.545}


def test_single_quantity_with_provenance(tmp_path):
    scan(tmp_path)
    r = run_module(ctx(tmp_path, **BASE))
    assert r.expression is None and len(r.quantities) == 1
    q = r.quantities[0]
    assert q.name == "delta_pump" and q.unit == "1" and q.evaluation == "A"
    assert q.distribution.kind == "sampled"      # issue 11 item 12: the sampled shape is kept
    assert q.distribution.mean == q.value and q.distribution.std == q.standard_uncertainty
    # its quantile function is the samples': the 2.5 % and 97.5 % points match the sampled
    # interval (numpy.quantile of the same draws, the oracle) to the table's resolution
    lo, hi = r.diagnostics["prediction"]["interval_95"]
    got = q.distribution.ppf(np.array([0.025, 0.975]))
    assert got[0] == near(lo, abs=0.02 * (hi - lo)) and got[1] == near(hi, abs=0.02 * (hi - lo))
    assert q.provenance.origin == "module:pump"
    assert q.provenance.notes[0].startswith("model extrapolation, not a measurement")
    assert q.provenance.files[0].path == "scan.csv" and q.provenance.files[0].rows == "1-181"
    assert "seed 20100430" in q.provenance.method      # the module's default (pump.fit.DEFAULT_SEED)
    # the truth (TRUTH through the published formula in 60-digit decimals, tests/pump_sim.py)
    # is covered at k = 3
    d_true = cascade_parts_decimal(-0.545, TRUTH[0], TRUTH[1:], 1)[2]
    assert abs(q.value - d_true) < 3 * q.standard_uncertainty
    json.dumps(r.diagnostics, allow_nan=False)
    for fig in r.diagnostics["figures"]:
        assert fig["id"] in ("pump_fit", "pump_residuals", "pump_error")
        for s in fig["series"]:
            assert len(s["x"]) <= 400
    assert {f["id"] for f in r.diagnostics["figures"]} == {"pump_fit", "pump_residuals",
                                                            "pump_error"}
    assert next(f for f in r.diagnostics["figures"] if f["id"] == "pump_error")["yscale"] == "log"


def test_discrepancy_allowance_is_its_own_row(tmp_path):
    scan(tmp_path)
    r = run_module(ctx(tmp_path, discrepancy_half_width=2e-8, **BASE))
    fit, allow = r.quantities
    assert (fit.name, allow.name) == ("delta_pump_fit", "delta_pump_model")
    assert r.expression == "delta_pump_fit + delta_pump_model"
    assert allow.distribution.kind == "rectangular" and allow.value == 0.0
    # JCGM 100 §4.3.7: u = a/√3 for a rectangular distribution of half-width a
    assert allow.standard_uncertainty == near(2e-8 / math.sqrt(3), rel=1e-15)
    assert allow.evaluation == "B" and math.isinf(allow.dof)


def test_a_model_prediction_without_allowance_is_warned(tmp_path):
    # review finding: δ from a fit alone carries only the fit's u (common practice: a model's
    # prediction needs an allowance for model discrepancy); the warning names the missing key
    scan(tmp_path)
    (q,) = run_module(ctx(tmp_path, **BASE)).quantities
    codes = [w.code for w in q.provenance.warnings]
    assert "pump.no_discrepancy_allowance" in codes
    (w,) = [w for w in q.provenance.warnings if w.code == "pump.no_discrepancy_allowance"]
    assert "discrepancy_half_width" in w.message and w.severity == "warning"
    fit, _ = run_module(ctx(tmp_path, discrepancy_half_width=2e-8, **BASE)).quantities
    assert "pump.no_discrepancy_allowance" not in [w.code for w in fit.provenance.warnings]


def test_escape_model_through_the_spec(tmp_path):
    rng = np.random.default_rng(41)
    v = np.repeat(np.linspace(-0.34, -0.26, 3), 16)
    t = np.tile(np.geomspace(2e-9, 1.5e-5, 16), 3)
    tau0, b = [5e-9, 6e-8, 1.2e-6], [40.0, 30.0, 25.0]
    y = escape_mean(escape_taus(tau0, b, v, -0.30), t) + rng.normal(0, 3e-3, v.size)
    (tmp_path / "esc.csv").write_text("hold_time_s,gate_voltage,n_mean,n_std\n" + "".join(
        f"{float(a)!r},{float(b)!r},{float(c)!r},0.003\n" for a, b, c in zip(t, v, y)))
    r = run_module(ctx(tmp_path, file="esc.csv", model="sequential-escape", plateau=2,
                       operating_point=-0.30, hold_time=3e-7))
    q = r.quantities[0]
    # truth: relative deviation (⟨ejected⟩ − 2)/2 with the hypoexponential mean (pump_sim)
    d_true = (escape_mean(escape_taus(tau0, b, [-0.30], -0.30), 3e-7)[0] - 2) / 2
    assert abs(q.value - d_true) < 3 * q.standard_uncertainty
    out = r.diagnostics["outcome"]
    assert out["p_exactly_n"] + out["p_n_minus_1"] + out["p_n_plus_1"] <= 1 + 1e-12
    assert r.diagnostics["best_operating_point"]["gate_voltage"] is not None
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, file="esc.csv", model="sequential-escape", plateau=2,
                       operating_point=-0.30, hold_time=1e-3))
    assert e.value.field == "inputs.delta_pump.hold_time" and "outside" in e.value.message
    ok = run_module(ctx(tmp_path, file="esc.csv", model="sequential-escape", plateau=2,
                        operating_point=-0.30, hold_time=3e-5, allow_extrapolation=True))
    assert any(n.startswith("extrapolated") for n in ok.quantities[0].provenance.notes)


def test_keys_are_registered():
    for key in ("file", "fit_file", "model", "plateau", "operating_point", "shared_slope",
                "allow_extrapolation", "discrepancy_half_width", "samples", "seed"):
        assert key in KEYS


# ---------------------------------------------------------------------------- bad input
def test_fewer_points_than_parameters(tmp_path):
    scan(tmp_path, v=np.array([-0.60, -0.56, -0.53]))      # 3 rows, 3 parameters
    with pytest.raises(DataError) as e:
        run_module(ctx(tmp_path, steps=2, **BASE))
    assert e.value.file.endswith("scan.csv")
    assert "at least 4 rows" in e.value.message


def test_no_step_inside_the_scanned_range(tmp_path):
    scan(tmp_path, v=np.linspace(-0.58, -0.55, 40))          # only the first plateau
    with pytest.raises(DataError) as e:
        run_module(ctx(tmp_path, **BASE))
    assert e.value.field == "n_mean" and "no step" in e.value.message
    scan(tmp_path, v=np.linspace(-0.64, -0.55, 60), name="half.csv")  # step 2 missing
    with pytest.raises(DataError) as e:
        run_module(ctx(tmp_path, **{**BASE, "file": "half.csv"}))
    assert "step 2" in e.value.message and "scanned range" in e.value.message


def test_operating_point_outside_the_data(tmp_path):
    scan(tmp_path)
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, **{**BASE, "operating_point": -0.70}))
    assert e.value.field == "inputs.delta_pump.operating_point"
    assert e.value.file == "spec.toml" and "allow_extrapolation" in e.value.message
    with pytest.raises(SpecError) as e:                       # inside the data, off plateau 1
        run_module(ctx(tmp_path, **{**BASE, "operating_point": -0.50}))
    assert "not on plateau 1" in e.value.message


def test_fit_that_does_not_converge(tmp_path):
    scan(tmp_path)
    with pytest.raises(DataError) as e:
        run_module(ctx(tmp_path, max_evaluations=1, **BASE))
    assert "did not converge" in e.value.message and e.value.file.endswith("scan.csv")


def test_unresolved_step(tmp_path):
    # a step much sharper than the point spacing: no point on its edge, slope undetermined
    scan(tmp_path, v=np.linspace(-0.64, -0.46, 19), steps=[1e5, -0.6047, -0.5347, -0.4747])
    with pytest.raises(DataError) as e:
        run_module(ctx(tmp_path, **{**BASE, "operating_point": -0.57}))
    assert "not resolved" in e.value.message


@pytest.mark.parametrize("table, field", [
    ({"model": "cascade"}, "model"),
    ({"plateau": 0}, "plateau"),
    ({"plateau": 2}, "operating_point"),
    ({"loaded": 2}, "loaded"),
    ({"steps": 1}, "steps"),
    ({"samples": 10}, "samples"),
    ({"seed": -1}, "seed"),
    ({"discrepancy_half_width": -1e-8}, "discrepancy_half_width"),
    ({"file": "missing.csv"}, "file"),
    ({"fit_file": "x.toml"}, "fit_file"),
    ({"hold_time": 1e-7}, "hold_time"),
    ({"colour": "red"}, "colour"),
])
def test_bad_options_name_the_key(tmp_path, table, field):
    scan(tmp_path)
    (tmp_path / "x.toml").write_text("")
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, **{**BASE, **table}))
    assert e.value.field == f"inputs.delta_pump.{field}"
    assert e.value.file == "spec.toml"


def test_bad_data_rows_are_located(tmp_path):
    f = tmp_path / "scan.csv"
    f.write_text("gate_voltage,n_mean\n-0.6,0.1\n-0.59,abc\n")
    with pytest.raises(DataError) as e:
        run_module(ctx(tmp_path, **BASE))
    assert (e.value.row, e.value.field) == (2, "n_mean")
    f.write_text("gate_voltage,n_mean,n_sd\n-0.6,0.1,1\n")
    with pytest.raises(DataError) as e:
        run_module(ctx(tmp_path, **BASE))
    assert e.value.field == "n_sd" and "n_std" in e.value.message
