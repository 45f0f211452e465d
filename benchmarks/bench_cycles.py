"""On/off-record benchmark (issue 3): Type A analysis and the overlapping Allan deviation.

Run by hand (never in CI)::

    .venv/bin/python benchmarks/bench_cycles.py

What is measured, side by side in one run on one machine (times: minimum over the repeats):

1. ``budget.inputs.cycles.evaluate`` on an invented 10^6-reading record (CSV on disk, 60 s
   segments sampled at 10 Hz, 8333 cycles; white noise, linear drift). Target: < 2 s for the
   whole Type A analysis, CSV reading and SHA-256 digest included. For information, the same
   record at 1 Hz sampling (10^6 readings, 8333 cycles of 120 s) and the reading alone.
2. Overlapping Allan deviation at all octave factors of 10^6 points (m = 1, 2, ..., 2^18):
   ``budget.stats.allan.oadev`` against ``allantools.oadev`` on the same data and the same
   factors (allantools is the baseline, not a dependency of budget/). Target: ratio ≤ 0.5.
   The two are run alternately, so a load change on the machine hits both.
"""

from __future__ import annotations

import platform
import tempfile
import time
from pathlib import Path

import allantools
import numpy as np
import pandas as pd

from budget.inputs import cycles
from budget.inputs.context import InputContext
from budget.inputs.onoff_table import read_onoff
from budget.stats import allan

REPEATS = 5


def best(fn, repeats=REPEATS):
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def write_record(path: Path, n: int, dt: float, seg: float, seed: int) -> None:
    """Invented record: 1 mV step, 10 µV white noise per reading, 3 nV/s offset drift."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) * dt
    on = (t // seg).astype(int) % 2 == 1
    y = 2e-4 + 3e-9 * t + 1e-3 * on + 1e-5 * rng.normal(size=n)
    pd.DataFrame({"time_s": t, "reading": y, "pump": np.where(on, "on", "off")}).to_csv(
        path, index=False, float_format="%.10g")


def bench_typea() -> None:
    print("1. Type A analysis of a 10^6-reading record (target < 2 s)")
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for name, dt, seg in (("rec_10hz.csv", 0.1, 60.0), ("rec_1hz.csv", 1.0, 60.0)):
            write_record(folder / name, 10 ** 6, dt, seg, seed=1)
            ctx = InputContext(name="dV", table={"module": "cycles", "file": name},
                               folder=folder, spec_file="bench.toml")
            res = cycles.evaluate(ctx)
            t_all = best(lambda c=ctx: cycles.evaluate(c), 3)
            t_read = best(lambda p=folder / name: read_onoff(p), 3)
            d = res.diagnostics
            print(f"   {name}: {d['cycles_used']} cycles, method {d['uncertainty_method']}: "
                  f"evaluate {t_all:.3f} s (of which reading the CSV {t_read:.3f} s)")


def bench_oadev() -> None:
    print("2. Overlapping ADEV at all octave factors of 10^6 points (target ratio <= 0.5)")
    y = np.random.default_rng(2).normal(size=10 ** 6)
    m = allan.octave_factors(len(y), "oadev")
    taus = m.astype(float)
    ours = allan.oadev(y, m).deviation
    _, ref, _, _ = allantools.oadev(y, rate=1.0, data_type="freq", taus=taus)
    worst = float(np.max(np.abs(ours / ref - 1)))
    t_ours, t_ref = [], []
    for _ in range(REPEATS):          # alternate, so a load change hits both
        t0 = time.perf_counter()
        allan.oadev(y, m)
        t_ours.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        allantools.oadev(y, rate=1.0, data_type="freq", taus=taus)
        t_ref.append(time.perf_counter() - t0)
    a, b = min(t_ours), min(t_ref)
    print(f"   factors 1..{int(m[-1])} ({len(m)}), largest relative difference {worst:.1e}")
    print(f"   budget.stats.allan.oadev {a * 1e3:.1f} ms, allantools.oadev {b * 1e3:.1f} ms, "
          f"ratio {a / b:.2f}")


if __name__ == "__main__":
    print(f"Python {platform.python_version()}, numpy {np.__version__}, "
          f"allantools {getattr(allantools, '__version__', '?')}, {platform.machine()}")
    bench_typea()
    bench_oadev()
