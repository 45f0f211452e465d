"""Generate the invented characterisation data of the HQ-P7 pump (fixed seeds, reproducible).

INVENTED DATA. "Harwick Quantum Metrology Laboratory" and the "HQ-P7 GaAs tunable-barrier pump"
do not exist; every number below was made up to look like a realistic characterisation.

Writes, next to this script:

* ``plateau_scan.csv``   — ⟨n⟩ against the exit-gate voltage at 600 MHz, drawn from the
  decay-cascade staircase ⟨n⟩ = Σ_k exp(−exp(−a(V − V_k))) plus Gaussian noise of 1e-4;
* ``escape_record.csv``  — mean number ejected against hold time at five exit-gate voltages,
  from a direct simulation of sequential escapes (exponential waiting times of three loaded
  electrons, 4000 cycles per point);
* ``thermal_rates.csv``  — escape rates of the first electron against gate voltage at five
  temperatures, thermally activated (Arrhenius, lever arm 0.025) with 3 % scatter.

Run: ``python worked_examples/pump_characterisation/generate_data.py``
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
E_OVER_KB = 1.602176634e-19 / 1.380649e-23   # K/V, exact SI constants
HEADER = "# INVENTED DATA (demo): HQ-P7 GaAs tunable-barrier pump, Harwick Quantum Metrology " \
         "Laboratory; not a measurement\n"


def plateau_scan(rng: np.random.Generator) -> None:
    a = 310.0                                   # 1/V
    centres = (-0.6120, -0.5470, -0.4880)       # V; δ_2 = a (V_2 − V_1) ≈ 20.2
    v = np.round(np.linspace(-0.650, -0.470, 361), 6)
    n = sum(np.exp(-np.exp(-a * (v - c))) for c in centres)
    s = np.full(v.size, 1.0e-4)
    y = n + rng.normal(0, s)
    with open(HERE / "plateau_scan.csv", "w") as fh:
        fh.write(HEADER + "# exit-gate scan at 600 MHz; n_mean = I/(e f)\n")
        fh.write("gate_voltage,n_mean,n_std\n")
        for row in zip(v, y, s):
            fh.write(f"{row[0]:.6f},{row[1]:.7f},{row[2]:.1e}\n")


def escape_record(rng: np.random.Generator) -> None:
    tau0 = np.array([4.0e-9, 5.0e-8, 9.0e-7])   # s at V_ref, in order of escape (~10× apart)
    b = np.array([45.0, 35.0, 28.0])            # 1/V
    v_ref, cycles = -0.300, 4000
    volts = np.round(np.linspace(-0.340, -0.260, 5), 4)
    holds = np.geomspace(1.0e-9, 2.0e-5, 20)
    with open(HERE / "escape_record.csv", "w") as fh:
        fh.write(HEADER + "# three electrons loaded; n_mean = mean number ejected per cycle\n")
        fh.write("hold_time_s,gate_voltage,n_mean,n_std\n")
        for v in volts:
            tau = tau0 * np.exp(-b * (v - v_ref))
            for t in holds:
                waits = rng.exponential(tau, size=(cycles, 3)).cumsum(axis=1)
                ejected = (waits <= t).sum(axis=1)
                sd = max(ejected.std(ddof=1) / np.sqrt(cycles), 1.0 / cycles)
                fh.write(f"{t:.4e},{v:.4f},{ejected.mean():.5f},{sd:.2e}\n")


def thermal_rates(rng: np.random.Generator) -> None:
    alpha, barrier = 0.025, 4.0e-4              # lever arm; barrier in eV at V = 0
    with open(HERE / "thermal_rates.csv", "w") as fh:
        fh.write(HEADER + "# escape rate of the first electron at five bath temperatures\n")
        fh.write("temperature_k,gate_voltage,escape_rate,escape_rate_std\n")
        for T in (1.0, 1.5, 2.2, 3.2, 4.2):
            for v in np.linspace(-0.010, 0.010, 7):
                rate = 2.0e9 * np.exp(-(barrier - alpha * v) * E_OVER_KB / T)
                rate *= np.exp(rng.normal(0, 0.03))
                fh.write(f"{T:.2f},{v:.4f},{rate:.5e},{0.03 * rate:.2e}\n")


def main() -> None:
    plateau_scan(np.random.default_rng(20261101))
    escape_record(np.random.default_rng(20261102))
    thermal_rates(np.random.default_rng(20261103))


if __name__ == "__main__":
    main()
