"""Write the invented data of the three comparison runs (fixed seeds, same bytes every time).

    python worked_examples/runs/generate_data.py

INVENTED DATA: the laboratory, the pump, the instruments and the people do not exist. The
physics and the true values are in ``worked_examples/scenario_common.py``. Three 3-hour on/off
records of the same pump through the same resistor chain:

* ``data/run_a.csv`` — 2026-11-17, 600 MHz;
* ``data/run_b.csv`` — 2026-11-20, 600 MHz;
* ``data/run_c.csv`` — 2026-11-21, 900 MHz (a larger current, 144 pA, and a larger true
  pump error, −0.38 ppm instead of −0.12 ppm);

each 10 900 readings at 1 s, 100 s segments. The resistor history, the voltmeter's Josephson
calibration and the frequency comparisons are the same files as in ``resistor_chain/``
(byte-identical), so the three runs share those Type B terms and ``budget compare`` sees it.
``truth.json`` holds the generator's true values of each run (a synthetic truth).
"""

from __future__ import annotations

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

import scenario_common as sc  # noqa: E402

RUN_NAMES = ("run_a", "run_b", "run_c")


def main() -> None:
    data = HERE / "data"
    sc.write_resistor_history(data / "r1g_history.csv")
    sc.write_voltmeter_table(data / "dvm_josephson_calibration.csv")
    sc.write_frequency_comparisons(data / "rb_frequency_comparisons.csv")
    truths = {name: sc.write_onoff(data / f"{name}.csv", sc.RUNS[name]) for name in RUN_NAMES}
    sc.write_truth(HERE / "truth.json", truths)


if __name__ == "__main__":
    main()
