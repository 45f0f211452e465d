"""Tests of the ``frequency`` input module.

References: allantools (general-purpose frequency-stability library, used as a test oracle) for
the scaling of the Allan deviation with averaging time on simulated white FM and white PM
noise; the power law σ_y(τ) ∝ τ^(μ/2) with μ = −1 (white FM), −2 (white PM), 0 (flicker FM),
+1 (random-walk FM) (NIST SP 1065, memory); u = a/√3 for a bound a (JCGM 100 4.3.7); mean and
s/√n with ν = n − 1 (JCGM 100 4.2.1, 4.2.3, G.3.3); SI Brochure for e.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import allantools
import numpy as np
import pytest
from numeric import near

from budget.errors import DataError, SpecError
from budget.expression import compile_node, parse
from budget.inputs import InputContext, run_module
from budget.stats import allan

F0 = 500.0e6   # Hz, invented drive frequency


def ctx(folder, **table):
    return InputContext(name="f", table={"module": "frequency", "nominal_Hz": F0, **table},
                        folder=Path(folder), spec_file="spec.toml")


def test_single_typed_offset_gives_hz(tmp_path):
    (q,) = run_module(ctx(tmp_path, offset=2e-11, offset_uncertainty=1e-11)).quantities
    assert q.name == "f" and q.unit == "Hz"
    assert q.value == near(F0 * (1 + 2e-11), rel=1e-15)
    assert q.standard_uncertainty == near(F0 * 1e-11)
    assert q.distribution.kind == "normal"


def test_offset_bound_rectangular(tmp_path):
    (q,) = run_module(ctx(tmp_path, offset_bound=5e-11)).quantities
    assert q.distribution.kind == "rectangular"
    assert q.standard_uncertainty == near(F0 * 5e-11 / math.sqrt(3))     # a/√3
    assert q.distribution.low == near(F0 * (1 - 5e-11), rel=1e-15)


def test_aging_and_allan_rows_and_expression(tmp_path):
    r = run_module(ctx(tmp_path, offset=1e-11, offset_uncertainty=2e-12,
                       aging_per_day=5e-12, comparison_date="2026-11-01", at="2026-11-21",
                       allan_deviation=3e-12, allan_tau_s=1.0, measurement_time_s=36000.0,
                       allan_tau_max_s=1e5))
    names = [q.name for q in r.quantities]
    assert names == ["f_offset", "f_aging", "f_stab"]
    assert r.expression == "500000000.0 * (1 + f_offset) * (1 + f_aging) * (1 + f_stab)"
    aging, stab = r.quantities[1], r.quantities[2]
    assert aging.distribution.half_width / 1e-12 == near(5 * 20)   # rate × 20 days
    # white FM: σ_y(T) = σ_y(τ)·√(τ/T) (compared in units of 1e-12: pytest.approx's default
    # abs = 1e-12 would accept any number of order 1e-14)
    assert stab.standard_uncertainty / 1e-12 == near(3 / math.sqrt(36000.0), rel=1e-12)
    env = {q.name: q.value for q in r.quantities}
    assert compile_node(parse(r.expression))(env) == near(F0 * (1 + 1e-11), rel=1e-15)
    json.dumps(r.diagnostics, allow_nan=False)


@pytest.mark.parametrize("noise, mu", [("white-pm", -2), ("white-fm", -1), ("flicker-fm", 0),
                                       ("random-walk-fm", 1)])
def test_power_law(tmp_path, noise, mu):
    (q,) = run_module(ctx(tmp_path, allan_deviation=1e-12, allan_tau_s=10.0,
                          measurement_time_s=1000.0, noise=noise)).quantities
    # σ_y(T) = σ_y(τ)·(T/τ)^(μ/2), T/τ = 100 (NIST SP 1065 power laws, memory)
    assert q.standard_uncertainty == near(F0 * 1e-12 * 100 ** (mu / 2), rel=1e-12)


@pytest.mark.parametrize("data_type, noise", [("freq", "white-fm"), ("phase", "white-pm")])
def test_scaling_against_allantools(tmp_path, data_type, noise):
    # simulated noise (fixed seed): allantools' ADEV at τ0 = 1 s is the "specification";
    # the module's σ_y(T) must match allantools' ADEV at T = 100 s within its scatter
    # (~100 independent averages at 2·10^4 points ⇒ a few % ; 15 % allowed)
    rng = np.random.default_rng(20261201)
    data = rng.normal(0, 1e-11, 20000)
    taus, adev, _, _ = allantools.adev(data, rate=1.0, data_type=data_type, taus=[1.0, 100.0])
    (q,) = run_module(ctx(tmp_path, allan_deviation=float(adev[0]), allan_tau_s=1.0,
                          measurement_time_s=100.0, noise=noise)).quantities
    assert q.standard_uncertainty / F0 == near(adev[1], rel=0.15)


def test_white_fm_allan_equals_sd_of_means():
    # the reason the module takes σ_y(T) as u of the mean over T: for white FM the Allan
    # deviation at τ equals the standard deviation of τ-averages (NIST SP 1065, memory);
    # checked here on simulated data with the project's Allan deviation (budget.stats.allan,
    # itself checked against SP 1065 and allantools in test_allan.py). Tolerance: with 1000
    # block means each estimate has a relative sd ≈ 1/√(2·999) ≈ 2.2 %, their difference
    # ≈ 3.2 %; 0.15 is about 5 sd.
    rng = np.random.default_rng(3)
    y = rng.normal(0, 1e-11, 100000)
    m = 100
    means = y.reshape(-1, m).mean(axis=1)
    got = allan.adev(y, [m]).deviation[0]
    assert got / 1e-12 == near(means.std(ddof=1) / 1e-12, rel=0.15)
    # and both equal σ/√m = 1e-12 (white FM: the sd of an m-average), within the same 5 sd
    assert got / 1e-12 == near(1.0, rel=0.11)


def write_comparisons(folder, rows, header="date,fractional_offset"):
    (Path(folder) / "cmp.csv").write_text(header + "\n" + "\n".join(rows) + "\n")


def test_comparison_file_constant(tmp_path):
    ys = [1.2e-11, 0.8e-11, 1.5e-11, 1.1e-11, 0.9e-11]
    write_comparisons(tmp_path, [f"2026-10-{d:02d},{y!r}" for d, y in zip((1, 8, 15, 22, 29), ys)])
    (q,) = run_module(ctx(tmp_path, file="cmp.csv", at="2026-11-20")).quantities
    arr = np.array(ys)
    assert q.value == near(F0 * (1 + arr.mean()), rel=1e-15)       # JCGM 100 4.2.1
    assert q.standard_uncertainty == near(F0 * arr.std(ddof=1) / math.sqrt(5))
    assert q.dof == 4 and q.evaluation == "A"                                # ν = n − 1
    assert q.provenance.files[0].rows == "1-5"
    assert any("past the last comparison" in n for n in q.provenance.notes)


def test_comparison_file_with_aging_from_last_row(tmp_path):
    write_comparisons(tmp_path, ["2026-10-01,1e-11,2e-12", "2026-10-31,1.1e-11,2e-12"],
                      header="date,fractional_offset,uncertainty")
    r = run_module(ctx(tmp_path, file="cmp.csv", at="2026-11-20", aging_per_day=1e-12))
    off, aging = r.quantities
    # weighted mean of two equal-u comparisons: u = 2e-12/√2 ((Σw)^-1/2)
    assert off.standard_uncertainty == near(2e-12 / math.sqrt(2))
    assert aging.distribution.half_width == near(1e-12 * 20)   # 20 days since 10-31


@pytest.mark.parametrize("table, field", [
    ({}, "inputs.f.nominal_Hz"),
    ({"offset": 1e-11}, "inputs.f.offset_uncertainty"),
    ({"offset_bound": 1e-11, "offset_uncertainty": 1e-11}, "inputs.f.offset_bound"),
    ({"offset_bound": 1e-11, "offset_dof": 5}, "inputs.f.offset_dof"),
    ({"aging_per_day": 1e-12}, "inputs.f.days_since_comparison"),
    ({"offset_bound": 1e-11, "at": "2026-01-01"}, "inputs.f.at"),
    ({"allan_deviation": 1e-12, "allan_tau_s": 1.0}, "inputs.f.measurement_time_s"),
    ({"allan_deviation": 1e-12, "allan_tau_s": 1.0, "measurement_time_s": 10.0,
      "noise": "pink"}, "inputs.f.noise"),
    ({"offset_bound": 1e-11, "drift": "linear"}, "inputs.f.drift"),
    ({"file": "cmp.csv", "offset": 0.0, "at": "2026-11-01"}, "inputs.f.offset"),
    ({"offset": -2.0, "offset_uncertainty": 1e-11}, "inputs.f.offset"),   # f/f_nom − 1 < −1
])
def test_bad_options(tmp_path, table, field):
    write_comparisons(tmp_path, ["2026-10-01,1e-11", "2026-10-31,1.1e-11"])
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, **table))
    assert e.value.field == field, e.value.one_line()


def test_nominal_required_positive(tmp_path):
    c = InputContext(name="f", table={"module": "frequency", "nominal_Hz": -1.0,
                                      "offset_bound": 1e-11}, folder=tmp_path)
    with pytest.raises(SpecError):
        run_module(c)


@pytest.mark.parametrize("rows, at, row, col", [
    (["2026-10-01,1e-11", "yesterday,1e-11"], "2026-11-01", 2, "date"),
    (["2026-10-01,1e-11", "2026-10-02,abc"], "2026-11-01", 2, "fractional_offset"),
    (["2026-10-05,1e-11", "2026-10-01,1e-11"], "2026-09-01", 2, "date"),  # before first
    (["2026-10-01,1e-11", "2026-10-02,500000000.0"], "2026-11-01", 2, "fractional_offset"),  # Hz
])
def test_bad_comparison_file(tmp_path, rows, at, row, col):
    write_comparisons(tmp_path, rows)
    with pytest.raises(DataError) as e:
        run_module(ctx(tmp_path, file="cmp.csv", at=at))
    assert (e.value.row, e.value.field) == (row, col)


# ---- issue 11 item 13: the power law only inside its range ----------------------------------
def test_allan_law_not_extrapolated_below_tau(tmp_path):
    # a specification at τ says nothing about shorter averaging (NIST SP 1065: the power laws
    # describe a noise type over the τ range where it dominates, memory)
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, allan_deviation=1e-12, allan_tau_s=10.0, measurement_time_s=5.0))
    assert e.value.field == "inputs.f.measurement_time_s" and "below allan_tau_s" in e.value.message


def test_allan_white_fm_held_beyond_range_with_range_in_notes(tmp_path):
    (q,) = run_module(ctx(tmp_path, allan_deviation=1e-12, allan_tau_s=1.0,
                          measurement_time_s=36000.0)).quantities
    # default range 1 s … 100 s (two decades, this project's rule); held at σ_y(100 s) =
    # 1e-12·(100)^(-1/2) = 1e-13 (white FM, μ = −1, NIST SP 1065 power law, memory)
    assert q.standard_uncertainty / F0 / 1e-13 == near(1.0, rel=1e-12)
    notes = " ".join(q.provenance.notes)
    assert "1 s … 100 s" in notes and "held" in notes and "360 times" in notes
    # a number that rests on an assumption beyond the stated range is a warning (issue 12)
    assert [w.code for w in q.provenance.warnings] == ["frequency.extrapolation"]


def test_allan_rising_law_extrapolated_with_note(tmp_path):
    (q,) = run_module(ctx(tmp_path, allan_deviation=1e-13, allan_tau_s=1.0,
                          measurement_time_s=400.0, noise="random-walk-fm")).quantities
    # random-walk FM, μ = +1: σ_y(T) = σ_y(τ)·√(T/τ) = 1e-13·20 (NIST SP 1065, memory)
    assert q.standard_uncertainty / F0 / 1e-13 == near(20.0, rel=1e-12)
    assert any("extrapolated beyond" in n for n in q.provenance.notes)
    assert [w.code for w in q.provenance.warnings] == ["frequency.extrapolation"]


def test_allan_range_end_below_tau_refused(tmp_path):
    with pytest.raises(SpecError) as e:
        run_module(ctx(tmp_path, allan_deviation=1e-12, allan_tau_s=10.0, measurement_time_s=50.0,
                       allan_tau_max_s=5.0))
    assert e.value.field == "inputs.f.allan_tau_max_s"
