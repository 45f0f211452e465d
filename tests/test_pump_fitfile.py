"""Fit-result files: the same pump term as from raw data, and malformed files refused by field.

The raw-data path is the reference for the fit-file path (issue 4, deliverable 4): identical
parameters, covariance, seed and sample count must give an identical term. Data are synthetic,
generated here with fixed seeds by tests/pump_sim.py (independent of the package's models).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from pump_sim import escape_mean, escape_taus, staircase

from budget.errors import DataError, SpecError
from budget.inputs import InputContext, run_module
from budget.inputs.pump.fitfile import fit_file_text, read_fit_file, record_from_dict


def make_scan(folder: Path) -> Path:
    rng = np.random.default_rng(12)
    v = np.linspace(-0.64, -0.46, 181)
    y = staircase(v, 300.0, (-0.60, -0.5333, -0.47)) + rng.normal(0, 1e-4, v.size)
    f = folder / "scan.csv"
    f.write_text("gate_voltage,n_mean,n_std\n" + "".join(
        f"{float(a)!r},{float(b)!r},0.0001\n" for a, b in zip(v, y)))
    return f


def make_record(folder: Path) -> Path:
    rng = np.random.default_rng(13)
    v = np.repeat(np.linspace(-0.34, -0.26, 3), 16)
    t = np.tile(np.geomspace(2e-9, 1.5e-5, 16), 3)
    y = escape_mean(escape_taus([5e-9, 6e-8, 1.2e-6], [40.0, 30.0, 25.0], v, -0.30), t)
    y = y + rng.normal(0, 3e-3, y.size)
    f = folder / "escape.csv"
    f.write_text("hold_time_s,gate_voltage,n_mean,n_std\n" + "".join(
        f"{float(a)!r},{float(b)!r},{float(c)!r},0.003\n" for a, b, c in zip(t, v, y)))
    return f


def ctx(folder: Path, **table) -> InputContext:
    return InputContext(name="delta_pump", table={"module": "pump", **table}, folder=folder,
                        spec_file="spec.toml")


RAW = {
    "decay-cascade": ({"model": "decay-cascade", "plateau": 1, "operating_point": -0.545},
                      make_scan),
    "sequential-escape": ({"model": "sequential-escape", "plateau": 2,
                           "operating_point": -0.30, "hold_time": 3e-7, "loaded": 3},
                          make_record),
}


@pytest.mark.parametrize("model", list(RAW))
@pytest.mark.parametrize("fmt", ["toml", "json"])
def test_fit_file_gives_the_same_term(tmp_path, model, fmt):
    keys, maker = RAW[model]
    make = maker(tmp_path)
    raw = run_module(ctx(tmp_path, file=make.name, seed=77, samples=5000, **keys))
    rec = raw.diagnostics["fit_result"]
    text = fit_file_text(record_from_dict(rec, "diagnostics"), fmt)
    (tmp_path / f"fit.{fmt}").write_text(text)
    via = run_module(ctx(tmp_path, fit_file=f"fit.{fmt}", seed=77, samples=5000))
    q1, q2 = raw.quantities[0], via.quantities[0]
    assert q2.name == q1.name == "delta_pump"
    assert q2.value == q1.value                        # bit-identical: same θ, Σ, seed, samples
    assert q2.standard_uncertainty == q1.standard_uncertainty
    assert q2.dof == q1.dof
    assert any("fit-result file" in n for n in q2.provenance.notes)
    assert any("model extrapolation" in n for n in q2.provenance.notes)


def test_written_file_reads_back(tmp_path):
    a_json = run_module(ctx(tmp_path, file=make_scan(tmp_path).name, model="decay-cascade",
                            plateau=1, operating_point=-0.545)).diagnostics["fit_result"]
    f = tmp_path / "r.json"
    f.write_text(json.dumps(a_json))
    rec = read_fit_file(f)
    assert rec.model == "decay-cascade" and rec.settings == {"steps": 3, "shared_slope": True}
    assert list(rec.values) == a_json["parameter_values"]


GOOD = {"kind": "pump-fit-result", "version": 1, "model": "decay-cascade", "steps": 2,
        "shared_slope": True, "plateau": 1, "operating_point": -0.545,
        "gate_range": [-0.64, -0.5], "parameter_names": ["a", "V_1", "V_2"],
        "parameter_values": [300.0, -0.6, -0.5333],
        "covariance": [[1e-2, 0, 0], [0, 1e-12, 0], [0, 0, 1e-12]]}


def _with(**changes):
    d = json.loads(json.dumps(GOOD))
    for k, v in changes.items():
        if v is None:
            d.pop(k)
        else:
            d[k] = v
    return d


@pytest.mark.parametrize("content, field", [
    (_with(kind="other"), "kind"),
    (_with(version=2), "version"),
    (_with(model="decay-casade"), "model"),
    (_with(plateau=None), "plateau"),
    (_with(steps=1), "steps"),
    (_with(parameter_names=["a", "V_2", "V_1"]), "parameter_names"),
    (_with(parameter_values=[300.0, -0.6]), "parameter_values"),
    (_with(parameter_values=[300.0, "x", -0.5]), "parameter_values[2]"),
    (_with(covariance=[[1e-2, 0, 0], [0, 1e-12, 0]]), "covariance"),
    (_with(covariance=[[1e-2, 0, 0], [0, 1e-12, 0], [0, 0]]), "covariance[3]"),
    (_with(covariance=[[1e-2, 1e-6, 0], [0, 1e-12, 0], [0, 0, 1e-12]]), "covariance[1][2]"),
    (_with(covariance=[[1e-2, 0, 0], [0, -1e-12, 0], [0, 0, 1e-12]]), "covariance[2][2]"),
    (_with(covariance=[[1e-2, 2e-7, 0], [2e-7, 1e-12, 0], [0, 0, 1e-12]]), "covariance"),
    (_with(gate_range=[0.1, -0.1]), "gate_range"),
    (_with(colour="blue"), "colour"),
    (_with(operating_point=None), "operating_point"),
])
def test_malformed_fit_files_name_the_field(tmp_path, content, field):
    f = tmp_path / "bad.json"
    f.write_text(json.dumps(content))
    with pytest.raises(DataError) as e:
        read_fit_file(f)
    assert e.value.field == field
    assert e.value.file == str(f)


def test_syntax_errors_name_the_line(tmp_path):
    t = tmp_path / "bad.toml"
    t.write_text('kind = "pump-fit-result"\nversion = 1\nmodel = = "x"\n')
    with pytest.raises(DataError) as e:
        read_fit_file(t)
    assert e.value.line == 3
    j = tmp_path / "bad.json"
    j.write_text('{"kind": "pump-fit-result",\n "version": 1,,\n}')
    with pytest.raises(DataError) as e:
        read_fit_file(j)
    assert e.value.line == 2


def test_spec_checks_with_fit_file(tmp_path):
    (tmp_path / "fit.json").write_text(json.dumps(GOOD))
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, fit_file="fit.json", steps=3))
    assert e.value.field == "inputs.delta_pump.steps"
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, fit_file="fit.json", model="sequential-escape"))
    assert e.value.field == "inputs.delta_pump.model"
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, fit_file="fit.json", operating_point=-0.3))
    assert e.value.field == "inputs.delta_pump.operating_point"
    assert "outside" in e.value.message
    ok = run_module(ctx(tmp_path, fit_file="fit.json", operating_point=-0.55))
    assert any("replaces" in n for n in ok.quantities[0].provenance.notes)
