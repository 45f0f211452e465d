"""Synthetic-truth recovery checks of the chain worked examples (resistor chain, amplifier
chain, the three comparison runs).

What the reference is. The worked examples' data are INVENTED: each folder's generate_data.py
draws them, with fixed seeds, from "true" instruments and a true pump error δ defined in
worked_examples/scenario_common.py, and writes those true values to truth.json. The truth is
therefore the generator's own setting — these are recovery checks on synthetic data with a
known truth (allowed by the project rules), not comparisons with an external reference. They
would fail if the generator and the tool disagreed about the physics (a gain applied the wrong
way round, a resistor correction with the wrong sign, a drift referred to the wrong date, a
settling transient left in the data) or if the budget's uncertainty were far too small.

Coverage used in the checks:
* the measurands (I, delta_I): the budget's own expanded uncertainty U (p = 95 %, k from
  t_p(ν_eff), JCGM 100 G.4–G.6), as an auditor would use it;
* each input (dV, R, g, f, A_TR, combined from their module rows): k = 3 times the combined
  standard uncertainty — a gross-error check (a sign or unit mistake moves a term by many u);
  for a normal error |e| ≤ 3u holds with probability 99.7 % (common practice), so with about
  twenty such checks a false alarm stays unlikely.
The seeds are fixed, so every outcome is deterministic; Monte Carlo is off to stay fast (it is
not what these checks are about: the linear result and its U are).
"""

from __future__ import annotations

import hashlib
import importlib.util
import json
import math
import sys
from functools import cache
from pathlib import Path

import pytest
from numeric import near

from budget import evaluate, load_spec

EXAMPLES = Path(__file__).resolve().parent.parent / "worked_examples"

# spec file -> (folder of its truth.json, run name in truth.json)
SPECS = {
    "resistor_chain/spec.toml": ("resistor_chain", "resistor_chain"),
    "amplifier_chain/spec.toml": ("amplifier_chain", "amplifier_chain"),
    "runs/run_a.toml": ("runs", "run_a"),
    "runs/run_b.toml": ("runs", "run_b"),
    "runs/run_c.toml": ("runs", "run_c"),
}
K_TERM = 3.0   # gross-error coverage factor for single inputs (see the module docstring)


def _scenario():
    spec = importlib.util.spec_from_file_location("scenario_common",
                                                  EXAMPLES / "scenario_common.py")
    mod = importlib.util.module_from_spec(spec)
    sys.modules["scenario_common"] = mod      # dataclasses look their module up there
    spec.loader.exec_module(mod)
    return mod


@cache
def budget_of(spec: str):
    return evaluate(load_spec(EXAMPLES / spec), monte_carlo_enabled=False)


@cache
def truth_of(spec: str) -> dict:
    folder, run = SPECS[spec]
    return json.loads((EXAMPLES / folder / "truth.json").read_text(encoding="utf-8"))["runs"][run]


def combined(b, names: list[str], base: str) -> tuple[float, float]:
    """Value and standard uncertainty of base·Π(1 + δ) from the module rows (relative
    uncertainties added in quadrature: first order, independent rows, JCGM 100 eq. 10)."""
    q0 = b.input(base)
    value, rel2 = q0.value, (q0.standard_uncertainty / q0.value) ** 2
    for n in names:
        q = b.input(n)
        value *= 1 + q.value
        rel2 += q.standard_uncertainty ** 2
    return value, abs(value) * math.sqrt(rel2)


@pytest.mark.parametrize("spec", SPECS)
def test_deviation_recovered_within_expanded_uncertainty(spec):
    # synthetic truth: δ is the generator's setting (scenario_common.PUMP_DELTA)
    b, t = budget_of(spec), truth_of(spec)
    m = b.measurand("delta_I")
    assert m.unit == "µA/A"
    assert abs(m.value - t["dev_ppm_true"]) <= m.expanded_uncertainty, (m.value, t)
    # ... and U must be neither far too small nor uselessly wide. Derivation of the expected
    # size: the Type A term dominates, u ≈ S·√(2/(d·T))/ΔV (planning rule of white on/off
    # cycling, equal on and off time; shared/DOMAIN.md) with S ≈ 4.0 µV/√Hz (Johnson noise of
    # 1 GΩ at 296 K, √(4·k_B·T·R)), d = 0.64 kept, T = 3-10 h, ΔV = 96-144 mV: 0.39-0.70 ppm,
    # so U ≈ 0.8-1.4 ppm (k ≈ 2; +15 % for neighbouring differences sharing an off segment).
    # The bounds allow a factor of about two either side.
    assert 0.3 < m.expanded_uncertainty < 3.0


@pytest.mark.parametrize("spec", SPECS)
def test_current_recovered_within_expanded_uncertainty(spec):
    b, t = budget_of(spec), truth_of(spec)
    m = b.measurand("I")
    assert m.unit == "A"
    assert abs(m.value - t["I_true_A"]) <= m.expanded_uncertainty


@pytest.mark.parametrize("spec", SPECS)
def test_each_input_recovered(spec):
    b, t = budget_of(spec), truth_of(spec)
    # dV is the *reading* difference: the true voltage step divided by the voltmeter's g
    dv = b.input("dV")
    assert abs(dv.value - t["reading_difference_true_V"]) <= K_TERM * dv.standard_uncertainty
    g, u_g = combined(b, ["g_lin", "g_res", "g_stab"], "g_cal")
    assert abs(g - t["g_true"]) <= K_TERM * u_g
    # f = f_nom·(1 + y_offset)·(1 + y_stab): compare the fractional offsets
    f_nominal = t["f_set_Hz"]
    y = b.input("f_offset").value + b.input("f_stab").value
    u_y = math.hypot(b.input("f_offset").standard_uncertainty,
                     b.input("f_stab").standard_uncertainty)
    assert abs(y - (t["f_true_Hz"] / f_nominal - 1)) <= K_TERM * u_y
    if t["chain"] == "resistor":
        r, u_r = combined(b, ["R_temp", "R_volt"], "R_cal")
        assert abs(r - t["R_true_ohm"]) <= K_TERM * u_r
        cal = b.input("R_cal")
        assert abs(cal.value - t["R_reference_conditions_true_ohm"]) <= \
            K_TERM * cal.standard_uncertainty
    else:
        a, u_a = combined(b, ["A_TR_temp", "A_TR_stab", "A_TR_offset"], "A_TR_cal")
        assert abs(a - t["A_TR_true_ohm"]) <= K_TERM * u_a


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _data_rows(path: Path) -> int:
    lines = [ln for ln in path.read_text(encoding="utf-8").splitlines()
             if ln.strip() and not ln.lstrip().startswith("#")]
    return len(lines) - 1          # header excluded


def _row_set(rows: str) -> set[int]:
    out: set[int] = set()
    for part in rows.split(","):
        a, _, b = part.strip().partition("-")
        out.update(range(int(a), int(b or a) + 1))
    return out


@pytest.mark.parametrize("spec", SPECS)
def test_every_file_term_names_its_file_digest_and_rows(spec):
    b = budget_of(spec)
    folder = (EXAMPLES / spec).parent
    with_files = {q.name: q for q in b.inputs if q.provenance.files}
    expected = {"dV", "g_cal", "f_offset", "R_cal" if "A_TR_cal" not in with_files else
                "A_TR_cal"}
    assert expected <= set(with_files)
    for q in with_files.values():
        for ref in q.provenance.files:
            path = folder / ref.path
            assert path.is_file(), ref.path            # relative to the spec's folder
            assert ref.sha256 == _sha256(path)
            rows = _row_set(ref.rows)
            assert rows and min(rows) >= 1 and max(rows) <= _data_rows(path)
    # histories and tables: every data row used; the on/off record: settle_s = 36 s (20 s for
    # the amplifier) of each 100 s segment dropped, so 64 % (80 %) of the used readings remain
    for name in expected - {"dV"}:
        ref = with_files[name].provenance.files[0]
        assert _row_set(ref.rows) == set(range(1, _data_rows(folder / ref.path) + 1))
    ref = with_files["dV"].provenance.files[0]
    kept = len(_row_set(ref.rows)) / _data_rows(folder / ref.path)
    settle = 20 if "amplifier" in spec else 36
    # fraction kept of the whole file: (100 − settle)/100 of the 2·cycles middle segments
    assert kept == near((100 - settle) / 100, abs=0.02)


def test_shared_files_are_byte_identical():
    # budget compare treats a term as shared when its files carry the same SHA-256 digest
    # (budget/compare.py): the copies written for each example must be the same bytes
    groups = {
        "r1g_history.csv": ["resistor_chain", "runs"],
        "dvm_josephson_calibration.csv": ["resistor_chain", "amplifier_chain", "runs"],
        "rb_frequency_comparisons.csv": ["resistor_chain", "amplifier_chain", "runs"],
    }
    for name, folders in groups.items():
        digests = {_sha256(EXAMPLES / f / "data" / name) for f in folders}
        assert len(digests) == 1, name


def test_every_csv_says_it_is_invented_on_its_first_line():
    files = sorted(EXAMPLES.glob("*/data/*.csv"))
    files = [p for p in files if p.parent.parent.name in ("resistor_chain", "amplifier_chain",
                                                          "runs")]
    # 14 data files in the three folders at the time of writing; the floor guards against a
    # glob that silently matches nothing
    assert len(files) >= 13
    for p in files:
        with p.open(encoding="utf-8") as fh:
            first = fh.readline()
        assert first.startswith("# INVENTED DATA"), p


def test_truth_files_match_the_generator(tmp_path):
    # truth.json must be what scenario_common computes now (not stale after an edit), and the
    # small shared files must come out byte-identical when written twice (fixed seeds). The
    # committed bytes themselves are not compared: numpy allows a Generator's stream to change
    # between numpy versions (NEP 19), so that check would depend on the installed numpy.
    sc = _scenario()
    for spec in SPECS:
        t = truth_of(spec)
        fresh = sc.run_truth(sc.RUNS[t["run"]])
        for key, value in fresh.items():
            if isinstance(value, float):
                assert t[key] == near(value, rel=1e-15, abs=0.0), key
            else:
                assert t[key] == value, key
    for writer in (sc.write_resistor_history, sc.write_voltmeter_table,
                   sc.write_frequency_comparisons, sc.write_amplifier_history):
        a, b = tmp_path / "a.csv", tmp_path / "b.csv"
        writer(a)
        writer(b)
        assert a.read_bytes() == b.read_bytes()
