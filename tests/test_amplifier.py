"""Tests of the ``amplifier`` input module.

References: synthetic calibration histories with a known truth (fixed seeds); the same weighted
fit checked against numpy.polyfit; u = a/√3 for a rectangular bound of half-width a
(JCGM 100 4.3.7); the offset term δ = I_os/I (derivation in the module docstring).
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

A0 = 1.0e9          # V/A, invented transresistance of a 1 GΩ amplifier
DRIFT = -0.2e-6     # relative per year (invented truth)
U = 0.1e-6 * A0     # standard uncertainty of each calibration (invented)
START = pd.Timestamp("2024-03-01")
AT = "2026-01-20"


def truth(ts):
    return A0 * (1 + DRIFT * (ts - START).days / 365.25)


def write(folder, *, seed=0, n=8, extra_col=""):
    rng = np.random.default_rng(seed)
    rows = ["date,value,expanded_uncertainty,coverage_factor" + extra_col]
    for i in range(n):
        d = START + pd.Timedelta(days=80 * i)
        rows.append(f"{d.date()},{truth(d) + rng.normal(0, U)!r},{2 * U!r},2"
                    + (",0.5" if extra_col else ""))
    (Path(folder) / "amp.csv").write_text("\n".join(rows) + "\n")


def ctx(folder, **table):
    return InputContext(name="A_TR", table={"module": "amplifier", "file": "amp.csv", **table},
                        folder=Path(folder), spec_file="spec.toml")


def test_prediction_matches_polyfit_and_truth(tmp_path):
    write(tmp_path, seed=2)
    df = pd.read_csv(tmp_path / "amp.csv", parse_dates=["date"])
    days = ((df.date - pd.Timestamp(AT)) / pd.Timedelta(days=1)).to_numpy()
    # numpy.polyfit, w = 1/u, cov="unscaled": intercept at the measurement date
    p, cov = np.polyfit(days, df.value, 1, w=np.full(len(df), 1 / U), cov="unscaled")
    r = run_module(ctx(tmp_path, at=AT, inflate="never"))
    (q,) = r.quantities
    assert q.name == "A_TR" and q.unit == "Ω"
    assert q.value == near(p[1], rel=1e-13)
    assert q.standard_uncertainty == near(math.sqrt(cov[1, 1]), rel=1e-8)
    # synthetic truth recovered within 3u
    assert abs(q.value - truth(pd.Timestamp(AT))) < 3 * q.standard_uncertainty


def test_all_rows_and_expression(tmp_path):
    write(tmp_path)
    r = run_module(ctx(tmp_path, at=AT, alpha=-5e-7, alpha_uncertainty=1e-7,
                       reference_temperature_C=23.0, temperature_C=22.5,
                       temperature_uncertainty_C=0.2, stability_bound=3e-7,
                       offset_current_A=0.0, offset_current_bound_A=2e-17,
                       signal_current_A=1.602176634e-10))
    names = [q.name for q in r.quantities]
    assert names == ["A_TR_cal", "A_TR_temp", "A_TR_stab", "A_TR_offset"]
    assert r.expression == "A_TR_cal * (1 + A_TR_temp) * (1 + A_TR_stab) * (1 + A_TR_offset)"
    stab, off = r.quantities[2], r.quantities[3]
    assert stab.distribution.kind == "rectangular"
    assert stab.standard_uncertainty == near(3e-7 / math.sqrt(3))     # a/√3
    # δ_os = I_os/I: a ±2e-17 A bound on a 160 pA signal (e·f at 1 GHz, SI Brochure)
    assert off.standard_uncertainty == near(2e-17 / 1.602176634e-10 / math.sqrt(3))
    temp = r.quantities[1]
    # JCGM 100 eq. 10: u² = (α u_T)² + (ΔT u_α)², ΔT = −0.5 K
    assert temp.standard_uncertainty == near(math.hypot(5e-7 * 0.2, 0.5 * 1e-7))
    env = {q.name: q.value for q in r.quantities}
    assert compile_node(parse(r.expression))(env) == near(
        env["A_TR_cal"] * (1 + temp.value), rel=1e-15)
    json.dumps(r.diagnostics, allow_nan=False)
    assert r.diagnostics["figures"][0]["id"] == "A_TR-drift"


def test_gain_mode_unit(tmp_path):
    write(tmp_path)
    (q,) = run_module(ctx(tmp_path, at=AT, quantity="gain")).quantities
    assert q.unit == "1" and "gain" in q.description


def test_voltage_column_accepted_and_noted(tmp_path):
    write(tmp_path, extra_col=",voltage_V")
    (q,) = run_module(ctx(tmp_path, at=AT)).quantities
    assert any("voltage_V" in n for n in q.provenance.notes)


def test_offset_needs_signal_and_uncertainty(tmp_path):
    write(tmp_path)
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, at=AT, offset_current_bound_A=1e-17))
    assert e.value.field == "inputs.A_TR.signal_current_A"
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, at=AT, offset_current_A=1e-17, signal_current_A=1e-10))
    assert e.value.field == "inputs.A_TR.offset_current_bound_A"
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, at=AT, offset_current_bound_A=1e-17,
                       offset_current_uncertainty_A=1e-17, signal_current_A=1e-10))
    assert "not both" in e.value.message


def test_bad_history_and_options(tmp_path):
    (tmp_path / "amp.csv").write_text("date,value,expanded_uncertainty,coverage_factor\n"
                                      "2024-01-01,1e9,100,2\n2024-05-01,1e9,100,0\n")
    with pytest.raises(DataError) as e:
        run_module(ctx(tmp_path, at=AT))
    assert (e.value.row, e.value.field) == (2, "coverage_factor")
    write(tmp_path)
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, at=AT, quantity="transconductance"))
    assert e.value.field == "inputs.A_TR.quantity"
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, at=AT, stability_bound=-1e-7))
    assert e.value.field == "inputs.A_TR.stability_bound"
    with pytest.raises(SpecError) as e:   # voltage coefficient belongs to the resistor
        run_module(ctx(tmp_path, at=AT, voltage_coefficient=1e-8))
    assert e.value.field == "inputs.A_TR.voltage_coefficient"
