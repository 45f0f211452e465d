"""Write the invented "season": a year of pump runs through two chains, for the logbook.

**Everything here is invented** (the Harwick Quantum Metrology Laboratory, its HQ-P7 pump and
instruments do not exist). The script writes, byte for byte the same each time (fixed seed):

* ``specs/NN_YYYY-MM-DD_<chain>.toml`` — 48 small budget specs, one per run, alternating
  between the 1 GΩ resistor chain and the current-amplifier chain from 2026-06-01 to
  2027-05-24;
* ``data/amplifier_history_v1.csv`` and ``_v2.csv`` — the amplifier's calibration history
  before and after its routine recalibration on 2026-10-05 (v2 has one more row);
* ``truth.json`` — the generator's true values, including the invented hidden error.

The invented story: the resistor HQ-R1G-03 is recalibrated on 2027-01-15 and the new
certificate's value is 0.7·10⁻⁶ too high (a hidden calibration error). Every resistor-chain
run after it reads the pump 0.7 ppm low; the amplifier chain does not move. The logbook's step
test should flag the resistor chain at that recalibration and name the new certificate.

To keep ``make demo`` fast each run is a *small* spec: the on/off record is typed in as the
summary of its Type A analysis (value, u and ν of the mean on − off voltage, as the ``cycles``
module would report for a 10-hour run) instead of a 10-hour record file; the resistor and the
voltmeter are typed in from their certificates; the amplifier comes from its history file
through the ``amplifier`` module. ``make_records.py`` evaluates every spec (linear propagation,
no Monte Carlo) and writes the records.

    python worked_examples/season/generate_data.py
"""

from __future__ import annotations

import json
from datetime import date, timedelta
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
SEED = 20260601
E = 1.602176634e-19          # C, exact (SI 2019)
F = 600.0e6                  # Hz, drive frequency
DELTA = -0.12e-6             # the pump's true relative error (invented)
G_TRUE = 1.0 + 2.1e-7        # voltmeter gain correction, true (invented)
U_G = 0.02e-6                # its certificate's standard uncertainty (relative)
R_TRUE = 1_000_000_210.0     # Ω, resistor, stable over the season (invented)
U_R = 0.05e-6                # relative standard uncertainty of a resistor certificate
HIDDEN_ERROR = 0.7e-6        # relative error of the 2027 resistor certificate (invented)
RECAL_R = date(2027, 1, 15)
A0, A_DRIFT = 1_000_000_050.0, 0.3e-6   # Ω at 2026-01-01 and relative drift per year
U_A_CAL = 0.04e-6            # relative u of an amplifier calibration
RECAL_A = date(2026, 10, 5)
U_TYPE_A = 0.12e-6           # relative u of a 10-hour run's Type A mean (invented)
DOF_TYPE_A = 150
START = date(2026, 6, 1)
N_RUNS = 48

HEADER = ("INVENTED DATA for the logbook worked example of qcs-budget ({what}). "
          "Harwick Quantum Metrology Laboratory (invented). Not a measurement.")


def a_true(d: date) -> float:
    return A0 * (1 + A_DRIFT * (d - date(2026, 1, 1)).days / 365.25)


def amplifier_history(rng: np.random.Generator) -> tuple[str, str]:
    dates = [date(2024, 4, 10), date(2024, 10, 8), date(2025, 4, 14), date(2025, 10, 6),
             date(2026, 4, 7)]
    rows = [(d, a_true(d) * (1 + U_A_CAL * rng.standard_normal())) for d in dates]
    new = (RECAL_A, a_true(RECAL_A) * (1 + U_A_CAL * rng.standard_normal()))
    head = (f"# {HEADER.format(what='transresistance history of the current amplifier HQ-CA2')}\n"
            "date,value,expanded_uncertainty,coverage_factor,certificate\n")

    def line(i: int, d: date, v: float) -> str:
        return f"{d.isoformat()},{v:.3f},{2 * U_A_CAL * v:.3f},2,HQML-CCC-A{i + 1:02d} (invented)\n"

    v1 = head + "".join(line(i, d, v) for i, (d, v) in enumerate(rows))
    v2 = v1 + line(len(rows), *new)
    return v1, v2


def spec_text(n: int, d: date, chain: str, dv: float, u_dv: float, amp_file: str,
              r_cert: tuple[float, str], g_cert: float) -> str:
    at = f"{d.isoformat()}T23:00"
    common = f'''# INVENTED DATA — run {n} of the logbook season (see README.md); not a measurement.
[budget]
title = "HQ-P7 pump at 600 MHz, {'1 GΩ resistor' if chain == 'resistor-voltmeter'
                                  else 'current amplifier'} chain, {d.isoformat()} (invented)"
coverage_probability = 0.95

[report]
laboratory = "Harwick Quantum Metrology Laboratory (invented)"
item = "HQ-P7 GaAs tunable-barrier pump, chip 7B (invented)"
item_serial = "HQ-P7-7B"
measurement_date = "{d.isoformat()} 18:00 to {(d + timedelta(days=1)).isoformat()} 04:00"
remarks = "INVENTED DATA for a demonstration; not a measurement result."

[model]
chain = "{chain}"
deviation_unit = "ppm"
n = 1

[monte_carlo]
enabled = false
seed = {SEED + n}                     # recorded: the same spec gives a byte-identical record

[inputs.dV]
value = {dv!r}
standard_uncertainty = {u_dv!r}
dof = {DOF_TYPE_A}
evaluation = "A"
unit = "V"
description = "mean on − off voltage of the 10 h run, typed in from its on/off analysis"
source = "on/off analysis of the run of {d.isoformat()} (invented)"

[inputs.g]
value = {g_cert!r}
standard_uncertainty = {U_G * g_cert!r}
unit = "1"
description = "voltmeter HQ-DVM-2 gain correction"
source = "Josephson calibration HQML-JV-2026-05 of 2026-05-20 (invented)"

[inputs.f]
value = {F!r}
distribution = "rectangular"
half_width = 0.006
unit = "Hz"
description = "drive frequency, synthesizer locked to the rubidium standard"
source = "rubidium HQ-RB1 against GNSS, monthly comparison (invented)"
'''
    if chain == "resistor-voltmeter":
        value, source = r_cert
        return common + f'''
[inputs.R]
value = {value!r}
standard_uncertainty = {U_R * value!r}
unit = "Ω"
description = "1 GΩ reference resistor HQ-R1G-03 at 23 °C"
source = "{source}"
'''
    return common + f'''
[inputs.A_TR]
module = "amplifier"
description = "transresistance of the current amplifier HQ-CA2"
file = "../data/{amp_file}"
at = "{at}"
drift = "linear"
'''


def main() -> None:
    rng = np.random.default_rng(SEED)
    (HERE / "specs").mkdir(exist_ok=True)
    (HERE / "data").mkdir(exist_ok=True)
    for old in (HERE / "specs").glob("*.toml"):
        old.unlink()
    v1, v2 = amplifier_history(rng)
    (HERE / "data" / "amplifier_history_v1.csv").write_text(v1, encoding="utf-8")
    (HERE / "data" / "amplifier_history_v2.csv").write_text(v2, encoding="utf-8")
    r_old = (R_TRUE * (1 + U_R * rng.standard_normal()),
             "CCC certificate HQML-R-2026-0310 of 2026-03-10 (invented)")
    r_new = (R_TRUE * (1 + HIDDEN_ERROR),
             "CCC certificate HQML-R-2027-0115 of 2027-01-15 (invented)")
    g_cert = G_TRUE * (1 + U_G * rng.standard_normal())
    i_true = E * F * (1 + DELTA)
    runs = []
    for n in range(N_RUNS):
        d = START + timedelta(days=round(n * 357 / (N_RUNS - 1)))
        chain = "resistor-voltmeter" if n % 2 == 0 else "amplifier-voltmeter"
        ref = R_TRUE if chain == "resistor-voltmeter" else a_true(d)
        noise = U_TYPE_A * rng.standard_normal()
        dv = i_true * ref / G_TRUE * (1 + noise)
        r_cert = r_old if d < RECAL_R else r_new
        amp = "amplifier_history_v1.csv" if d < RECAL_A else "amplifier_history_v2.csv"
        name = f"{n + 1:02d}_{d.isoformat()}_{chain.split('-')[0]}.toml"
        (HERE / "specs" / name).write_text(
            spec_text(n + 1, d, chain, dv, U_TYPE_A * dv, amp, r_cert, g_cert),
            encoding="utf-8")
        runs.append({"spec": name, "date": d.isoformat(), "chain": chain,
                     "type_a_noise_relative": noise})
    truth = {"note": "INVENTED DATA: the generator's true values, not a measurement",
             "pump_delta_ppm": DELTA * 1e6, "voltmeter_gain_true": G_TRUE,
             "resistor_true_ohm": R_TRUE, "resistor_certificate_before": r_old,
             "resistor_certificate_after": r_new,
             "hidden_error_relative": HIDDEN_ERROR, "resistor_recalibration": RECAL_R.isoformat(),
             "amplifier_recalibration": RECAL_A.isoformat(),
             "expected_step_ppm": -HIDDEN_ERROR / (1 + HIDDEN_ERROR) * 1e6, "runs": runs}
    (HERE / "truth.json").write_text(json.dumps(truth, indent=2, ensure_ascii=False) + "\n",
                                     encoding="utf-8")


if __name__ == "__main__":
    main()
