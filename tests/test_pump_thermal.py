"""Thermal-activation check on escape rates at several temperatures.

Physics (DOMAIN notes, common practice): thermally activated escape over a barrier lowered
linearly by the gate has Γ = Γ_0 exp(−(E_b − α e V)/(k_B T)), so d ln Γ/dV = α e/(k_B T) falls
as 1/T; tunnelling has a slope that barely depends on T. e and k_B are exact in the 2019 SI
(SI Brochure, 9th edition), taken from scipy.constants. Rates are synthetic, generated here with
fixed seeds and 2 % log-normal scatter.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy import constants

from budget.errors import DataError
from budget.inputs.pump.thermal import read_thermal, thermal_check

E_OVER_KB = constants.e / constants.k          # 11604.518... K/V (exact SI constants)
TEMPS = np.array([0.8, 1.2, 1.8, 2.7, 4.0])     # K
VOLTS = np.linspace(-0.02, 0.02, 9)             # V, gate offset from the working point


def thermal_rates(rng, alpha=0.02, e_b=2e-4, scatter=0.02):
    """Arrhenius rates Γ = 1e9 exp(−(E_b − α e V)/(k_B T)), E_b in eV (so E_b/k_B in K·V)."""
    T = np.repeat(TEMPS, VOLTS.size)
    V = np.tile(VOLTS, TEMPS.size)
    G = 1e9 * np.exp(-(e_b - alpha * V) * E_OVER_KB / T) * np.exp(rng.normal(0, scatter, T.size))
    return T, V, G, scatter * G


def tunnel_rates(rng, slope=150.0, scatter=0.02):
    """Rates with the same gate slope at every temperature: Γ = 1e6 exp(slope·V)."""
    T = np.repeat(TEMPS, VOLTS.size)
    V = np.tile(VOLTS, TEMPS.size)
    G = 1e6 * np.exp(slope * V) * np.exp(rng.normal(0, scatter, T.size))
    return T, V, G, scatter * G


def test_common_practice_slope_falls_with_temperature_in_thermal_regime():
    # Common practice: in the thermal regime the slope of ln Γ against gate voltage falls as the
    # temperature rises, as 1/T; the check says "thermal activation" and returns the lever arm
    # used to generate the data within 3 standard uncertainties.
    alpha = 0.02
    c = thermal_check(*thermal_rates(np.random.default_rng(1), alpha))
    assert all(np.diff(c.slopes) < 0)
    assert c.verdict == "thermal activation"
    # 4 is the module's decision threshold (pump.thermal.DECISIVE: Δχ² of 4, i.e. a 2σ
    # preference for one model)
    assert c.delta_chi2 > 4
    assert abs(c.lever_arm - alpha) < 3 * c.lever_arm_uncertainty
    assert abs(c.exponent - 1) < 3 * c.exponent_uncertainty
    # slope·T is the same at every temperature: α e/k_B (derivation). Tolerance: a line through
    # 9 points 5 mV apart with 2 % scatter in ln Γ has u(slope) = 0.02/√Σ(V − V̄)² = 0.52 /V
    # against slopes α e/(k_B T) = 58 /V (4 K) … 290 /V (0.8 K): ≤ 0.9 %, so 5 % is > 5 sd
    assert np.allclose(np.asarray(c.slopes) * TEMPS, alpha * E_OVER_KB, rtol=0.05)


def test_tunnelling_slope_independent_of_temperature():
    # DOMAIN notes: for tunnelling the slope barely depends on T -> verdict "tunnelling", γ ≈ 0.
    c = thermal_check(*tunnel_rates(np.random.default_rng(2)))
    assert c.verdict == "tunnelling"
    assert c.delta_chi2 < -4
    assert abs(c.exponent) < 3 * c.exponent_uncertainty


def test_undecided_when_the_temperatures_cannot_tell():
    # Two close temperatures and large scatter: 1/T and a constant cannot be told apart
    # (derivation: the two models differ by ~4 % in slope, far below the slope uncertainty).
    rng = np.random.default_rng(3)
    T = np.repeat([1.00, 1.04], 5)
    V = np.tile(np.linspace(-0.01, 0.01, 5), 2)
    G = 1e9 * np.exp(0.02 * V * E_OVER_KB / T) * np.exp(rng.normal(0, 0.3, T.size))
    c = thermal_check(T, V, G, 0.3 * G)
    assert c.verdict == "undecided"
    assert abs(c.delta_chi2) < 4


def test_neither_when_both_models_fail():
    # Slopes that rise with temperature contradict both hypotheses (p < 0.01 for each).
    rng = np.random.default_rng(4)
    T = np.repeat(TEMPS, VOLTS.size)
    V = np.tile(VOLTS, TEMPS.size)
    G = np.exp(100 * T * V) * np.exp(rng.normal(0, 0.01, T.size))
    assert thermal_check(T, V, G, 0.01 * G).verdict == "neither"


def test_reads_csv_and_refuses_bad_rows(tmp_path: Path):
    T, V, G, U = thermal_rates(np.random.default_rng(5))
    f = tmp_path / "rates.csv"
    f.write_text("# synthetic\ntemperature_k,gate_voltage,escape_rate,escape_rate_std\n" + "".join(
        f"{float(a)!r},{float(b)!r},{float(c)!r},{float(d)!r}\n" for a, b, c, d in zip(T, V, G, U)))
    assert read_thermal(f).verdict == "thermal activation"
    bad = tmp_path / "bad.csv"
    bad.write_text("temperature_k,gate_voltage,escape_rate\n1,0,5\n1,0.1,-3\n2,0,4\n2,0.1,6\n")
    with pytest.raises(DataError) as e:
        read_thermal(bad)
    assert (e.value.row, e.value.field) == (2, "escape_rate")
    one = tmp_path / "one.csv"
    one.write_text("temperature_k,gate_voltage,escape_rate\n1,0,5\n1,0.1,6\n1,0.2,7\n1,0.3,9\n")
    with pytest.raises(DataError, match="two or more temperatures"):
        read_thermal(one)
    few = tmp_path / "few.csv"
    few.write_text("temperature_k,gate_voltage,escape_rate\n1,0,5\n1,0.1,6\n2,0,4\n2,0.1,6\n"
                   "2,0.2,9\n")
    with pytest.raises(DataError) as e:
        read_thermal(few)
    assert e.value.field == "gate_voltage" and e.value.row == 1
