"""Units benchmark (issue 10): a spec with a unit on every input against the same spec in SI.

Run by hand (never in CI)::

    .venv/bin/python benchmarks/bench_units.py

The same invented budget (I = g·dV/R and its deviation from n·e·f, five typed-in inputs)
written twice: in coherent SI without units, and with ``unit`` on every input (µV, GΩ, MHz, a
constant in MHz) and ``[units] I = "pA"``. Both are evaluated by ``budget.evaluate`` with
10^6 Monte Carlo trials, alternately (paired), so load changes hit both. Target: the units
spec within 10 % of the SI spec. Units are resolved once to factors before propagation
(budget.units, budget.model_units); the Monte Carlo ratio against bare numpy is measured by
benchmarks/bench_engine.py, which the units layer does not touch (propagate/ is unchanged).
"""

from __future__ import annotations

import platform
import statistics
import time

from budget import evaluate, parse_spec

TRIALS = 1_000_000
REPEATS = 7

COMMON = """
[budget]
title = "units benchmark (invented numbers)"
[model]
I = "g * dV / R"
dev = "g * dV / (n * e * f * R) - 1"
[monte_carlo]
trials = 1000000
seed = 1
"""
SI = COMMON + """
[constants]
n = 1
[inputs.g]
value = 1.00000012
standard_uncertainty = 2e-8
[inputs.dV]
value = 0.0961306
standard_uncertainty = 2e-9
[inputs.R]
value = 1.0000021e9
standard_uncertainty = 5.0
[inputs.f]
value = 600e6
standard_uncertainty = 1e-3
"""
UNITS = COMMON + """
[units]
I = "pA"
dev = "µA/A"
[constants]
n = 1
[inputs.g]
value = 1.00000012
standard_uncertainty = 2e-8
unit = "1"
[inputs.dV]
value = 96130.6
standard_uncertainty = 0.002
unit = "µV"
[inputs.R]
value = 1.0000021
standard_uncertainty = 5e-9
unit = "GΩ"
[inputs.f]
value = 600
standard_uncertainty = 1e-9
unit = "MHz"
"""


def once(text: str) -> float:
    spec = parse_spec(text)
    t0 = time.process_time()
    evaluate(spec)
    return time.process_time() - t0


def main() -> None:
    si, un = [], []
    once(SI), once(UNITS)   # warm-up: imports, the pint registry
    for _ in range(REPEATS):
        si.append(once(SI))
        un.append(once(UNITS))
    a = evaluate(parse_spec(SI)).measurand("I")
    b = evaluate(parse_spec(UNITS)).measurand("I")
    ratios = [u / s for u, s in zip(un, si)]
    print(f"python {platform.python_version()}, {platform.machine()}, {TRIALS:,} trials, "
          f"{REPEATS} paired repeats, process CPU time")
    print("| spec | min | median | max |")
    print("|---|---|---|---|")
    for name, t in (("coherent SI, no units", si), ("unit on every input, I in pA", un)):
        print(f"| {name} | {min(t):.3f} s | {statistics.median(t):.3f} s | {max(t):.3f} s |")
    print(f"| ratio units / SI (paired) | {min(ratios):.3f} | {statistics.median(ratios):.3f} "
          f"| {max(ratios):.3f} |")
    print(f"same result: I = {a.value!r} A and {b.value!r} pA (× 1e-12 = {b.value * 1e-12!r})")


if __name__ == "__main__":
    main()
