"""Write the invented data of the amplifier-chain worked example (fixed seeds, same bytes every
time).

    python worked_examples/amplifier_chain/generate_data.py

INVENTED DATA: the laboratory, the pump, the instruments and the people do not exist. The
physics and the true values are in ``worked_examples/scenario_common.py``; this script only
picks the files of this example:

* ``data/amplifier_history.csv`` — seven calibrations of the current amplifier's
  transresistance (about 1e9 V/A) against the quantum Hall resistance over two years (drift
  −0.21 ppm/year, U = 0.10 ppm, k = 2, with ``temperature_C``);
* ``data/dvm_josephson_calibration.csv`` and ``data/rb_frequency_comparisons.csv`` — the same
  voltmeter calibration and frequency comparisons as the resistor chain (byte-identical copies);
* ``data/onoff_4h.csv`` — a 4-hour on/off record of the same pump at 600 MHz the next evening,
  1 reading per second, 100 s segments (14 500 readings); the amplifier's input current noise
  (2.4 fA/√Hz, with a little 1/f) is lower than the Johnson noise of the 1 GΩ resistor;
* ``truth.json`` — the generator's true values (δ = −0.12 ppm, I, A_TR, g, f at the run),
  including an unmodelled +0.05 ppm change of the amplifier since its last calibration that the
  spec's stability bound (±0.15 ppm) has to cover.
"""

from __future__ import annotations

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

import scenario_common as sc  # noqa: E402


def main() -> None:
    data = HERE / "data"
    sc.write_amplifier_history(data / "amplifier_history.csv")
    sc.write_voltmeter_table(data / "dvm_josephson_calibration.csv")
    sc.write_frequency_comparisons(data / "rb_frequency_comparisons.csv")
    truth = sc.write_onoff(data / "onoff_4h.csv", sc.RUNS["amplifier_chain"])
    sc.write_truth(HERE / "truth.json", {"amplifier_chain": truth})


if __name__ == "__main__":
    main()
