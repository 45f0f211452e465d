"""Write the invented data of the resistor-chain worked example (fixed seeds, same bytes every
time).

    python worked_examples/resistor_chain/generate_data.py

INVENTED DATA: the laboratory, the pump, the instruments and the people do not exist. The
physics and the true values are in ``worked_examples/scenario_common.py``; this script only
picks the files of this example:

* ``data/r1g_history.csv`` — ten calibrations of the 1 GΩ reference resistor over three years
  (drift +0.52 ppm/year, U = 0.24 ppm then 0.18 ppm, k = 2, with ``temperature_C`` and
  ``voltage_V``);
* ``data/dvm_josephson_calibration.csv`` — the voltmeter read against a Josephson standard at
  ±50 … ±200 mV (gain error +0.32 ppm, a slight quadratic and cubic nonlinearity);
* ``data/rb_frequency_comparisons.csv`` — monthly comparisons of the rubidium standard that
  references the pump's synthesizer with GNSS (offset a few 1e-11, aging 1.5e-13 per day);
* ``data/onoff_10h.csv`` — the 10-hour on/off record at 600 MHz, 1 reading per second,
  100 s pump off / 100 s pump on (36 100 readings: it starts and ends with the pump off);
* ``truth.json`` — the generator's true values (δ = −0.12 ppm, I, R, g, f at the run), used by
  tests/test_worked_examples.py as a synthetic truth.

The first three files are written by the same functions for the other chain examples, so their
copies are byte-identical (same SHA-256 digest, hence recognised as shared by budget compare).
"""

from __future__ import annotations

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

import scenario_common as sc  # noqa: E402


def main() -> None:
    data = HERE / "data"
    sc.write_resistor_history(data / "r1g_history.csv")
    sc.write_voltmeter_table(data / "dvm_josephson_calibration.csv")
    sc.write_frequency_comparisons(data / "rb_frequency_comparisons.csv")
    truth = sc.write_onoff(data / "onoff_10h.csv", sc.RUNS["resistor_chain"])
    sc.write_truth(HERE / "truth.json", {"resistor_chain": truth})


if __name__ == "__main__":
    main()
