"""The pump current against the nominal n·e·f (budget/cross_checks.py ``_plausibility``).

Synthetic truth: an invented on/off record of the resistor-voltmeter chain, generated here
(white noise on a square step ΔV = n_true·e·f·R·(1 + δ), δ = 0.8·10⁻⁶), so the current is
n_true·e·f to within δ and the reading noise. e = 1.602176634e-19 C exactly (SI Brochure, 9th
ed., 2019). The blunders are made by hand: pump labels swapped or leads reversed (ratio
I/(n·e·f) = −1, deviation −2), the spec's n = 2 on an n = 1 record (ratio 1/2, deviation
−(1 − 1/n)), unit = "mV" on readings in V (ratio 10⁻³). Bound 1e-3 (project convention, see
budget.cross_checks.PLAUSIBLE_DEVIATION: a quantized pump on its plateau is within ~1e-5 of
n·e·f, common practice).
"""

from __future__ import annotations

import numpy as np
import pytest

from budget.cross_checks import PLAUSIBLE_DEVIATION
from budget.engine import evaluate
from budget.spec import load_spec

E = 1.602176634e-19      # C, exact (SI 2019)
F = 600e6                # Hz (invented)
R = 1e9                  # Ω (invented)


def record(folder, *, n_true=1, sign=1.0, swap=False, scale=1.0, seed=3):
    rng = np.random.default_rng(seed)
    t = np.arange(0, 40 * 120.0)
    on = (t // 120).astype(int) % 2 == 1
    step = sign * n_true * E * F * R * (1 + 0.8e-6)
    y = (3e-6 + step * on + 4e-6 * rng.normal(size=len(t))) * scale
    lab = ~on if swap else on
    path = folder / "onoff.csv"
    with open(path, "w") as fh:
        fh.write("# INVENTED record (tests/test_plausibility.py)\ntime_s,reading,pump\n")
        fh.writelines(f"{a:g},{b:.12g},{'on' if c else 'off'}\n" for a, b, c in zip(t, y, lab))
    return path


def budget(folder, *, n=1, unit="V", r=R):
    spec = folder / "spec.toml"
    spec.write_text(f"""# INVENTED (tests/test_plausibility.py)
[budget]
title = "plausibility (invented)"
[model]
chain = "resistor-voltmeter"
n = {n}
[monte_carlo]
enabled = false
[inputs.dV]
module = "cycles"
file = "onoff.csv"
unit = "{unit}"
settle_s = 10
[inputs.R]
value = {r!r}
standard_uncertainty = 0
unit = "Ω"
[inputs.g]
value = 1.0
standard_uncertainty = 0
unit = "1"
[inputs.f]
value = {F!r}
standard_uncertainty = 0
unit = "Hz"
""", encoding="utf-8")
    b = evaluate(load_spec(spec), monte_carlo_enabled=False)
    return [w for w in b.warnings if w.code == "pump.implausible_current"], b


def test_bound_is_the_stated_convention():
    assert PLAUSIBLE_DEVIATION == 1e-3


def test_a_pump_on_its_plateau_is_quiet(tmp_path):
    record(tmp_path)
    ws, b = budget(tmp_path)
    assert ws == []
    dev = {m.name: m for m in b.measurands}["delta_I"]
    assert abs(dev.value - 0.8) < 3 * dev.standard_uncertainty + 0.1   # truth δ = 0.8e-6


@pytest.mark.parametrize("kind", ["swap", "reverse"])
def test_reversed_sign_names_labels_and_polarity(tmp_path, kind):
    record(tmp_path, swap=kind == "swap", sign=-1.0 if kind == "reverse" else 1.0)
    (w,) = budget(tmp_path)[0]
    assert w.severity == "error"
    assert "-2 (relative)" in w.message and "sign is reversed" in w.message
    assert "labels on/off swapped" in w.message and "polarity" in w.message


def test_n2_on_an_n1_record_names_the_plateau(tmp_path):
    record(tmp_path, n_true=1)
    (w,) = budget(tmp_path, n=2)[0]
    # deviation −(1 − 1/n) = −0.5 for n = 2 (derivation)
    assert w.severity == "error" and "-0.5 (relative)" in w.message
    assert "plateau n = 1, not the spec's n = 2" in w.message


def test_millivolt_unit_on_a_volt_file_names_the_prefix(tmp_path):
    record(tmp_path)
    (w,) = budget(tmp_path, unit="mV")[0]
    assert w.severity == "error" and "-0.999 (relative)" in w.message
    assert "off by 10^-3" in w.message and "unit prefix" in w.message


def test_an_unrecognised_deviation_lists_every_cause(tmp_path):
    # R typed in 2 % low: ratio 1/0.98 = 1.0204, beyond the bound and near no blunder's ratio
    record(tmp_path)
    (w,) = budget(tmp_path, r=0.98 * R)[0]
    assert "+0.0204" in w.message and "check the sign and polarity" in w.message
    # 0.05 % off (5e-4 < 1e-3) stays quiet
    assert budget(tmp_path, r=0.9995 * R)[0] == []


def _typed(folder, model: str, inputs: dict, constants: str = "") -> list:
    """Evaluate a spec of typed-in inputs (invented values); the implausible-current warnings."""
    body = "".join(f"[inputs.{k}]\nvalue = {v!r}\nstandard_uncertainty = {abs(v) * 1e-7!r}\n"
                   f"unit = \"{u}\"\n" for k, (v, u) in inputs.items())
    spec = folder / "spec.toml"
    spec.write_text(f"# INVENTED (tests/test_plausibility.py)\n[budget]\ntitle = \"t\"\n"
                    f"[model]\n{model}\n{constants}\n[monte_carlo]\nenabled = false\n{body}",
                    encoding="utf-8")
    b = evaluate(load_spec(spec), monte_carlo_enabled=False)
    return [w for w in b.warnings if w.code == "pump.implausible_current"]


@pytest.mark.parametrize("renamed", [False, True])
def test_ammeter_under_test_reading_is_judged(tmp_path, renamed):
    # The ammeter-under-test chain's measurands are pure numbers (ε, dev): the current it
    # judges is the input I_read, whose truth is n·e·f·(1 + ε) for an ammeter of gain error
    # ε = 3·10⁻⁶ (invented) against a pump with δ_pump = 0.
    name = "I_amm" if renamed else "I_read"
    model = 'chain = "ammeter-under-test"\nn = 1' + (
        '\ninputs_map = {I_read = "I_amm"}' if renamed else "")
    ok = 1 * E * F * (1 + 3e-6)
    inputs = {"f": (F, "Hz"), "delta_pump": (1e-9, "1")}
    assert _typed(tmp_path, model, {name: (ok, "A"), **inputs}) == []
    # the reading typed in mA as if in A (×10³, a unit prefix: derivation ratio 10³)
    (w,) = _typed(tmp_path, model, {name: (ok * 1e3, "A"), **inputs})
    assert w.severity == "error" and w.input == name and w.message.startswith(f"{name} = ")
    assert "+999.003 (relative)" in w.message and "off by 10^3" in w.message
    # leads reversed: ratio −(1 + 3e-6), deviation −2.000003, "-2" to 6 digits (derivation)
    (w,) = _typed(tmp_path, model, {name: (-ok, "A"), **inputs})
    assert "is -2 (relative)" in w.message and "sign is reversed" in w.message


def test_a_budget_merely_naming_n_e_f_is_not_a_pump_budget(tmp_path):
    # A shunt budget (invented): I = V/R·(1 + n·e) with n = 3 repeated readings and e = 0.002
    # a relative error term, f = 50 Hz the mains frequency. I = 1 mA is 1e-3/(3·0.002·50)
    # = 3.3·10⁻³ times "n·e·f" by arithmetic, but nothing here is a pump: no chain, no pump
    # input, e is not the elementary charge — no warning (the former check fired by names).
    ws = _typed(tmp_path, 'I = "V / R * (1 + n * e)"',
                {"V": (1.0, "V"), "R": (1000.0, "Ω"), "f": (50.0, "Hz")},
                "[constants]\nn = 3\ne = 0.002\n")
    assert ws == []


def test_a_free_form_pump_model_is_still_judged(tmp_path):
    # The model states n·e·f itself (built-in exact e, integer n): a pump budget. R typed in
    # 2 % low: ratio 1/0.98 (deviation +0.0204, as in the chain test above).
    model = 'I = "g * dV / R"\ndev = "I / (n * e * f) - 1"'
    inputs = {"g": (1.0, "1"), "dV": (E * F * R, "V"), "R": (0.98 * R, "Ω"), "f": (F, "Hz")}
    (w,) = _typed(tmp_path, model, inputs, "[constants]\nn = 1\n")
    assert "+0.0204" in w.message and w.message.startswith("I = ")
    # the same model with e = 0.5 typed in as a constant is no pump model: quiet
    assert _typed(tmp_path, model, inputs, "[constants]\nn = 1\ne = 0.5\n") == []
