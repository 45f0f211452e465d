"""The invented world behind the chain worked examples (resistor chain, amplifier chain, runs).

**Everything here is invented.** The Harwick Quantum Metrology Laboratory, the HQ-P7 pump, the
instruments and the people named do not exist; the numbers were chosen to look like a realistic
sub-ppm pump measurement, not taken from any measurement.

This module defines the *true* instruments — a reference resistor that drifts, a voltmeter with
a gain error and a slight nonlinearity, a rubidium-referenced synthesizer with a small offset,
a current amplifier, and the pump itself with a small true error δ — and draws every data file
of the chain examples from them with numpy Generators seeded by fixed numbers, so a
``generate_data.py`` script rewrites the same bytes each time. The files that several examples
share (the resistor history, the voltmeter's Josephson calibration, the frequency comparisons)
are written by one function each, so every copy is byte-identical and carries the same SHA-256
digest: ``budget compare`` then recognises the terms they feed as shared.

Each example also gets a ``truth.json`` with the generator's own settings (δ, I, R, g, f at the
run). A test checks that the budget recovers δ within its expanded uncertainty: a
*synthetic-truth recovery* check, not a comparison with an external reference.

Physics of an on/off record (see :func:`simulate_onoff`)
--------------------------------------------------------
Resistor chain: the pump current I = n·e·f·(1 + δ) (pump on) or 0 (pump off) and the
resistor's Johnson current noise flow into the node of R parallel to the cable capacitance C,
so the node voltage obeys τ·dv/dt = −v + R·(i_pump + i_noise), τ = R·C. Switching the pump gives
the exponential settling transient with time constant τ, and the noise has the Johnson density
√(4·k_B·T·R) at low frequency. The voltmeter sees v plus a thermoelectric offset (constant +
linear drift + slow wander) and reads r(V) = b + G·V + c₂·V² + c₃·V³ (its gain error and
nonlinearity), plus its own white noise and the 1/f noise of its zero; each reading is the mean
over a 1 s aperture, rounded to the 1 nV digit.
Amplifier chain: the same with a transresistance A_TR in place of R, the amplifier's input
current noise in place of the Johnson noise, and the amplifier's output filter as τ.
"""

from __future__ import annotations

import json
import math
import zlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

__all__ = [
    "E", "K_B", "N_ELECTRONS", "LAB", "PUMP", "OPERATOR", "APPROVER", "RESISTOR", "VOLTMETER",
    "FREQUENCY", "AMPLIFIER", "RUNS", "Run", "generator", "invented_header",
    "write_resistor_history", "write_voltmeter_table", "write_frequency_comparisons",
    "write_amplifier_history", "simulate_onoff", "write_onoff", "run_truth", "write_truth",
    "pump_delta", "pump_current",
]

E = 1.602176634e-19      # C, exact (SI 2019)
K_B = 1.380649e-23       # J/K, exact (SI 2019)
N_ELECTRONS = 1          # electrons per cycle (first plateau)
BASE_SEED = 20261118     # every Generator below is seeded from this and a dataset name

LAB = "Harwick Quantum Metrology Laboratory (invented)"
PUMP = "HQ-P7 GaAs tunable-barrier pump, chip 7B (invented)"
OPERATOR = "Imogen Vale (invented)"
APPROVER = "Tomas Ferrand (invented)"

_DAY = pd.Timedelta(days=1)


def generator(name: str) -> np.random.Generator:
    """The fixed-seed Generator of one dataset: seeded by BASE_SEED and the CRC-32 of its
    name, so adding a dataset never changes the numbers of another."""
    return np.random.default_rng([BASE_SEED, zlib.crc32(name.encode())])


def invented_header(what: str) -> list[str]:
    """The '#' comment lines every CSV starts with (the first one says the data are invented;
    the readers skip lines starting with '#')."""
    return [f"# INVENTED DATA for a worked example of qcs-budget: {what}. Not a measurement.",
            f"# {LAB}; pump {PUMP}.",
            "# Written by generate_data.py (fixed seeds) from worked_examples/scenario_common.py;",
            "# regenerate rather than edit by hand."]


def _write_csv(path: Path, header: list[str], columns: list[str], rows: list[list[str]]) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    lines = header + [",".join(columns)] + [",".join(r) for r in rows]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8", newline="\n")


def _days(a: str | pd.Timestamp, b: str | pd.Timestamp) -> float:
    return float((pd.Timestamp(a) - pd.Timestamp(b)) / _DAY)


# --------------------------------------------------------------------------- the pump
#: True relative error δ of the pump's current against n·e·f at each drive frequency (Hz).
#: Invented, and consistent with ../pump_characterisation/: there the decay-cascade fit of the
#: 600 MHz plateau scan predicts δ_pump ≈ −0.054 ppm at the operating exit-gate voltage
#: −0.558 V, with a model-discrepancy allowance of ±0.1 ppm; the true −0.12 ppm lies inside
#: that allowance. At 900 MHz the pump misses more electrons (less adiabatic loading).
PUMP_DELTA = {600.0e6: -0.12e-6, 900.0e6: -0.38e-6}
OPERATING_POINT_V = -0.558   # exit-gate voltage, as in ../pump_characterisation/spec.toml


def pump_delta(f_nominal: float) -> float:
    return PUMP_DELTA[f_nominal]


def pump_current(f_nominal: float, when: str) -> float:
    """True pump current (A) at drive frequency f_nominal set on the synthesizer: the actual
    frequency carries the reference's offset."""
    return N_ELECTRONS * E * FREQUENCY.actual(f_nominal, when) * (1 + pump_delta(f_nominal))


# --------------------------------------------------------------------------- the resistor
@dataclass(frozen=True)
class TrueResistor:
    """1 GΩ reference resistor: R(t, T, V) = R_ref(t)·(1 + α·ΔT + β·ΔT²)·(1 + γ·(V − V_ref)),
    ΔT = T − T_ref, with R_ref(t) a linear drift from its value at ``t0``."""

    item: str = "HQ-R1G-03 1 GΩ standard resistor in a thermostatted enclosure (invented)"
    r0: float = 0.999998622e9         # Ω at t0, T_ref, V_ref (≈ 1.00000032e9 by 2026-11-20,
    #                                   the value typed into ../typed_in_budget/spec.toml)
    t0: str = "2023-08-15"
    drift_per_year: float = 0.52e-6   # relative
    t_ref_C: float = 23.0
    v_ref: float = 10.0               # V: the CCC calibrations are made at 10 V
    alpha: float = 1.5e-6             # 1/K (true = the lab's nominal value)
    beta: float = -0.03e-6            # 1/K²
    gamma: float = -0.019e-6          # 1/V, true; the lab knows (-0.015 ± 0.008) ppm/V

    def value(self, when: str, temperature_C: float, voltage_V: float) -> float:
        years = _days(when, self.t0) / 365.25
        dt = temperature_C - self.t_ref_C
        return (self.r0 * (1 + self.drift_per_year * years)
                * (1 + self.alpha * dt + self.beta * dt * dt)
                * (1 + self.gamma * (voltage_V - self.v_ref)))


RESISTOR = TrueResistor()

#: Calibration dates of the resistor (about every four months over three years).
RESISTOR_CALIBRATIONS = ("2023-08-15", "2023-12-12", "2024-04-09", "2024-08-06", "2024-12-03",
                         "2025-04-01", "2025-07-29", "2025-11-25", "2026-03-24", "2026-07-21")


def write_resistor_history(path: Path) -> None:
    """Calibration history CSV of the resistor (columns of the ``resistor`` module).

    Each certificate value is the true R at the calibration's temperature and voltage plus a
    normal error with the certificate's standard uncertainty U/2 (so the scatter is consistent
    with the certificates). U is 0.24 ppm before 2025 and 0.18 ppm after an (invented) CCC
    upgrade, k = 2.
    """
    rng = generator("resistor-history")
    rows = []
    for i, d in enumerate(RESISTOR_CALIBRATIONS):
        temp = 23.0 + rng.normal(0.0, 0.015)
        temp = round(temp, 3)
        big_u = (0.24e-6 if d < "2025-01-01" else 0.18e-6) * 1e9
        true = RESISTOR.value(d, temp, 10.0)
        value = true + rng.normal(0.0, big_u / 2)
        rows.append([d, f"{value:.1f}", f"{big_u:.0f}", "2", f"{temp:.3f}", "10.0",
                     f"HQML-CCC-{d[:4]}-{101 + 17 * i:03d}"])
    _write_csv(path, invented_header("calibration history of the 1 GΩ reference resistor "
                                     "HQ-R1G-03 against the quantum Hall resistance (CCC)"),
               ["date", "value", "expanded_uncertainty", "coverage_factor", "temperature_C",
                "voltage_V", "certificate"], rows)


# --------------------------------------------------------------------------- the voltmeter
@dataclass(frozen=True)
class TrueVoltmeter:
    """8½-digit voltmeter: r(V) = b + G(t)·V + c₂·V² + c₃·V³ (V), G(t) = G_cal·(1 + s·days
    since its Josephson calibration)."""

    item: str = "HQ-DVM-2 8½-digit voltmeter, 100 mV range (invented)"
    calibrated: str = "2026-11-16T10:00"
    gain_error: float = 0.32e-6        # G_cal − 1: reads 0.32 ppm high
    zero: float = 0.41e-6              # V, zero offset b
    c2: float = 1.0e-7                 # 1/V
    c3: float = 4.0e-7                 # 1/V²
    gain_drift_per_day: float = 0.4e-8   # true; the lab bounds it by 2e-8 per day
    white_density: float = 0.05e-6     # V/√Hz, input noise on the 100 mV range
    flicker_h1: float = 1.2e-14        # V²/Hz at 1 Hz: 1/f noise of the zero (thermal EMFs,
    #                                    input stage), 1.5 µV/√Hz at the 5 mHz cycling rate
    resolution: float = 1e-9           # V, one digit on the 100 mV range

    def gain(self, when: str) -> float:
        return (1 + self.gain_error) * (1 + self.gain_drift_per_day
                                        * max(0.0, _days(when, self.calibrated)))

    def read(self, v: np.ndarray, when: str) -> np.ndarray:
        return self.zero + self.gain(when) * v + self.c2 * v * v + self.c3 * v ** 3

    def correction(self, dv: float, v_off: float, when: str) -> float:
        """True g = ΔV / (r(V_off + ΔV) − r(V_off)) for a step ΔV from V_off."""
        a = self.read(np.array([v_off, v_off + dv]), when)
        return dv / float(a[1] - a[0])


VOLTMETER = TrueVoltmeter()
#: Josephson reference voltages of the calibration (V): both polarities, 50 … 200 mV.
JVS_POINTS = (-0.2, -0.15, -0.1, -0.05, 0.05, 0.1, 0.15, 0.2)


def write_voltmeter_table(path: Path) -> None:
    """Josephson calibration table of the voltmeter: each reading is the mean of 600 one-second
    readings at a programmable-Josephson voltage, with polarity reversals that cancel the slow
    zero drift and its 1/f noise; the white noise of 50 nV/√Hz leaves 50 nV/√(2·600 s) ≈ 1.4 nV
    per point, taken as 1.5 nV."""
    rng = generator("voltmeter-calibration")
    rows = []
    for v in JVS_POINTS:
        reading = float(VOLTMETER.read(np.array([v]), VOLTMETER.calibrated)[0])
        reading += rng.normal(0.0, 1.5e-9)
        rows.append([f"{v:.9f}", f"{reading:.10f}"])
    _write_csv(path, invented_header("calibration of the voltmeter HQ-DVM-2 (100 mV range) "
                                     "against the laboratory's programmable Josephson "
                                     f"standard on {VOLTMETER.calibrated[:10]}"),
               ["reference_V", "reading_V"], rows)


# --------------------------------------------------------------------------- the frequency
@dataclass(frozen=True)
class TrueFrequency:
    """Rubidium-referenced synthesizer: f = f_set·(1 + y(t)), y linear in time (aging)."""

    item: str = "HQ-RB1 rubidium standard feeding the pump's synthesizer (invented)"
    y0: float = 2.6e-11                 # at t0
    t0: str = "2025-12-01"
    aging_per_day: float = 1.5e-13

    def offset(self, when: str) -> float:
        return self.y0 + self.aging_per_day * _days(when, self.t0)

    def actual(self, f_set: float, when: str) -> float:
        return f_set * (1 + self.offset(when))


FREQUENCY = TrueFrequency()
FREQUENCY_COMPARISONS = tuple(f"{y}-{m:02d}-01" for y, m in
                              [(2025, 12)] + [(2026, k) for k in range(1, 12)])


def write_frequency_comparisons(path: Path) -> None:
    """Monthly comparisons of the rubidium standard with a GNSS time receiver (one-day means,
    standard uncertainty 3e-12)."""
    rng = generator("frequency-comparisons")
    rows = []
    for d in FREQUENCY_COMPARISONS:
        y = FREQUENCY.offset(d) + rng.normal(0.0, 3e-12)
        rows.append([d, f"{y:.3e}", "3.0e-12"])
    _write_csv(path, invented_header("fractional frequency offset of the rubidium standard "
                                     "HQ-RB1 against a GNSS time receiver"),
               ["date", "fractional_offset", "uncertainty"], rows)


# --------------------------------------------------------------------------- the amplifier
@dataclass(frozen=True)
class TrueAmplifier:
    """Current amplifier of transresistance A(t, T) = A_ref(t)·(1 + α·(T − T_ref))·(1 + ε),
    with A_ref a linear drift and ε an unmodelled change since its last calibration."""

    item: str = "HQ-CA2 low-noise current amplifier, 1 GΩ transresistance (invented)"
    a0: float = 0.999998700e9          # Ω at t0 and T_ref
    t0: str = "2024-10-01"
    drift_per_year: float = -0.21e-6
    t_ref_C: float = 23.0
    alpha: float = 0.4e-6              # 1/K
    unmodelled: float = 0.05e-6        # the lab bounds such changes by ±0.15 ppm
    input_noise: float = 2.4e-15       # A/√Hz, white
    flicker_corner_Hz: float = 0.001
    tau_s: float = 1.0                 # output filter

    def value(self, when: str, temperature_C: float, *, since_calibration: bool) -> float:
        years = _days(when, self.t0) / 365.25
        a = (self.a0 * (1 + self.drift_per_year * years)
             * (1 + self.alpha * (temperature_C - self.t_ref_C)))
        return a * (1 + self.unmodelled) if since_calibration else a


AMPLIFIER = TrueAmplifier()
AMPLIFIER_CALIBRATIONS = ("2024-10-01", "2025-02-04", "2025-06-03", "2025-10-07", "2026-02-03",
                          "2026-06-02", "2026-10-06")


def write_amplifier_history(path: Path) -> None:
    """Calibration history of the amplifier's transresistance against the quantum Hall
    resistance (CCC), U = 0.10 ppm, k = 2."""
    rng = generator("amplifier-history")
    rows = []
    for i, d in enumerate(AMPLIFIER_CALIBRATIONS):
        temp = round(23.0 + rng.normal(0.0, 0.05), 2)
        big_u = 0.10e-6 * 1e9
        value = AMPLIFIER.value(d, temp, since_calibration=False) + rng.normal(0.0, big_u / 2)
        rows.append([d, f"{value:.1f}", f"{big_u:.0f}", "2", f"{temp:.2f}",
                     f"HQML-CCC-{d[:4]}-A{31 + 7 * i:02d}"])
    _write_csv(path, invented_header("calibration history of the transresistance of the "
                                     "current amplifier HQ-CA2 against the quantum Hall "
                                     "resistance (CCC)"),
               ["date", "value", "expanded_uncertainty", "coverage_factor", "temperature_C",
                "certificate"], rows)


# --------------------------------------------------------------------------- the runs
@dataclass(frozen=True)
class Run:
    """One on/off measurement of the pump."""

    name: str
    chain: str                 # "resistor" or "amplifier"
    start: str                 # ISO 8601 local time of the first reading
    segments: int              # pump-off and pump-on segments, odd: starts and ends off
    f_set: float               # Hz, drive frequency set on the synthesizer
    temperature_C: float       # true temperature of the resistor / amplifier during the run
    segment_s: float = 100.0
    dt_s: float = 1.0

    @property
    def duration_s(self) -> float:
        return self.segments * self.segment_s

    @property
    def midpoint(self) -> str:
        t = pd.Timestamp(self.start) + pd.Timedelta(seconds=self.duration_s / 2)
        return t.isoformat(timespec="minutes")


RUNS = {
    "resistor_chain": Run("resistor_chain", "resistor", "2026-11-18T19:00", 361, 600.0e6, 23.037),
    "amplifier_chain": Run("amplifier_chain", "amplifier", "2026-11-19T20:00", 145, 600.0e6,
                           23.12),
    "run_a": Run("run_a", "resistor", "2026-11-17T20:00", 109, 600.0e6, 23.031),
    "run_b": Run("run_b", "resistor", "2026-11-20T20:00", 109, 600.0e6, 23.043),
    "run_c": Run("run_c", "resistor", "2026-11-21T20:00", 109, 900.0e6, 23.046),
}

#: Thermoelectric offset at the voltmeter input: constant (V), drift (V/h), wander (V, hours).
_OFFSET = {"resistor": (1.7e-6, 0.15e-6, ((0.30e-6, 2.7), (0.20e-6, 5.3))),
           "amplifier": (-3.1e-6, 0.40e-6, ((0.50e-6, 1.9), (0.30e-6, 4.4)))}
_SUBSTEPS = 10      # fine steps per reading for the RC node and the 1 s aperture
_TAU_RESISTOR = 2.0   # s, R·C with C = 2 nF of cable and enclosure


def _flicker(rng: np.random.Generator, n: int, dt: float, h1: float) -> np.ndarray:
    """Gaussian noise with one-sided power spectral density h1/f (units²/Hz; h1 is the density
    at 1 Hz), shaped in the frequency domain: E|X_k|² = S(f_k)·n/(2·dt) for numpy's rfft."""
    f = np.fft.rfftfreq(n, dt)
    s = np.zeros_like(f)
    s[1:] = h1 / f[1:]
    amp = np.sqrt(s * n / (2 * dt))
    x = amp * (rng.normal(size=f.size) + 1j * rng.normal(size=f.size)) / math.sqrt(2)
    x[-1] = x[-1].real if n % 2 == 0 else x[-1]
    return np.fft.irfft(x, n=n)


def _lowpass(u: np.ndarray, h: float, tau: float, v0: float) -> np.ndarray:
    """First-order low-pass v' = (u − v)/τ with u held over each step h (exact update)."""
    from scipy.signal import lfilter
    a = math.exp(-h / tau)
    v, _ = lfilter([1 - a], [1, -a], u, zi=[a * v0])
    return v


def simulate_onoff(run: Run) -> tuple[pd.DataFrame, dict]:
    """The on/off record of ``run`` and the true values behind it.

    Returns a table with ``time_s``, ``reading`` (V, rounded to the voltmeter's 1 nV digit),
    ``pump`` ("on"/"off") and a dict of truths (see :func:`run_truth`).
    """
    rng = generator(f"onoff-{run.name}")
    truth = run_truth(run)
    n = int(round(run.duration_s / run.dt_s))
    h = run.dt_s / _SUBSTEPS
    m = n * _SUBSTEPS
    t_fine = np.arange(m) * h
    on_fine = (np.floor(t_fine / run.segment_s).astype(int) % 2) == 1   # starts off
    current = np.where(on_fine, truth["I_true_A"], 0.0)
    if run.chain == "resistor":
        gain, tau = truth["R_true_ohm"], _TAU_RESISTOR
        temp_k = run.temperature_C + 273.15
        noise_a = math.sqrt(4 * K_B * temp_k / gain)      # Johnson current noise, A/√Hz
        flicker_h1 = 0.0
    else:
        gain, tau = truth["A_TR_true_ohm"], AMPLIFIER.tau_s
        noise_a = AMPLIFIER.input_noise
        flicker_h1 = noise_a ** 2 * AMPLIFIER.flicker_corner_Hz
    # white noise held over a step h has one-sided density 2·h·variance
    i_noise = rng.normal(0.0, noise_a / math.sqrt(2 * h), m)
    if flicker_h1 > 0:
        i_noise += _flicker(rng, m, h, flicker_h1)
    node = _lowpass(gain * (current + i_noise), h, tau, 0.0)
    node = node.reshape(n, _SUBSTEPS).mean(axis=1)          # 1 s aperture of each reading
    t = np.arange(n) * run.dt_s
    hours = t / 3600.0
    const, drift, waves = _OFFSET[run.chain]
    offset = const + drift * hours
    for amp, period in waves:
        offset = offset + amp * np.sin(2 * math.pi * hours / period + rng.uniform(0, 2 * math.pi))
    dvm = VOLTMETER
    noise = rng.normal(0.0, dvm.white_density / math.sqrt(2 * run.dt_s), n)
    noise += _flicker(rng, n, run.dt_s, dvm.flicker_h1)
    reading = dvm.read(node + offset, run.midpoint) + noise
    reading = np.round(reading / dvm.resolution) * dvm.resolution
    pump = np.where((np.floor(t / run.segment_s).astype(int) % 2) == 1, "on", "off")
    table = pd.DataFrame({"time_s": t, "reading": reading, "pump": pump})
    truth["mean_offset_V"] = float(np.mean(offset))
    truth["g_true"] = dvm.correction(truth["dV_true_V"], truth["mean_offset_V"], run.midpoint)
    truth["reading_difference_true_V"] = truth["dV_true_V"] / truth["g_true"]
    return table, truth


def write_onoff(path: Path, run: Run) -> dict:
    """Write the on/off record CSV of ``run``; return its truths."""
    table, truth = simulate_onoff(run)
    what = (f"on/off record '{run.name}' of the pump at {run.f_set / 1e6:g} MHz through the "
            f"{'1 GΩ resistor' if run.chain == 'resistor' else 'current amplifier'} and the "
            f"voltmeter, started {run.start}, {run.segment_s:g} s segments")
    rows = [[f"{t:.0f}", f"{r:.9f}", p] for t, r, p in
            zip(table["time_s"], table["reading"], table["pump"])]
    _write_csv(path, invented_header(what), ["time_s", "reading", "pump"], rows)
    return truth


def run_truth(run: Run) -> dict:
    """The generator's true values at the run's midpoint (what the budget should recover)."""
    when = run.midpoint
    i_true = pump_current(run.f_set, when)
    out = {"run": run.name, "chain": run.chain, "at": when, "n": N_ELECTRONS,
           "exit_gate_V": OPERATING_POINT_V,
           "f_set_Hz": run.f_set, "f_true_Hz": FREQUENCY.actual(run.f_set, when),
           "delta_true": pump_delta(run.f_set), "dev_ppm_true": pump_delta(run.f_set) * 1e6,
           "I_true_A": i_true, "temperature_true_C": run.temperature_C}
    if run.chain == "resistor":
        # the working voltage is the voltage across R itself: solve V = I·R(V) by iteration
        v = i_true * 1e9
        for _ in range(3):
            v = i_true * RESISTOR.value(when, run.temperature_C, v)
        r = RESISTOR.value(when, run.temperature_C, v)
        out.update(R_true_ohm=r, dV_true_V=i_true * r, working_voltage_V=v,
                   R_reference_conditions_true_ohm=RESISTOR.value(when, RESISTOR.t_ref_C,
                                                                  RESISTOR.v_ref))
    else:
        a = AMPLIFIER.value(when, run.temperature_C, since_calibration=True)
        out.update(A_TR_true_ohm=a, dV_true_V=i_true * a, working_voltage_V=i_true * a,
                   A_TR_drift_line_true_ohm=AMPLIFIER.value(when, AMPLIFIER.t_ref_C,
                                                            since_calibration=False))
    return out


def write_truth(path: Path, truths: dict) -> None:
    """truth.json: the generator's settings for each run (a synthetic truth, not a reference)."""
    doc = {"note": ("INVENTED worked example. These are the generator's own true values "
                    "(scenario_common.py); the tests check that the budget recovers them "
                    "within its uncertainty. They are not an external reference."),
           "runs": truths}
    path.write_text(json.dumps(doc, indent=2, sort_keys=True) + "\n", encoding="utf-8")
