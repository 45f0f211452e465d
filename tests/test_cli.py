"""The ``budget`` command: run, validate, exit codes, the JSON record's keys, determinism.

Most tests call budget.cli.main with capsys (fast); a few run ``python -m budget`` in a
subprocess to see exactly what a user sees (real stderr, real warnings, real tracebacks).
The contracts come from /work/shared/DESIGN.md ("Contracts other parts rely on") and issue 2
items 6 and 7. The spec below is invented for the test.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
import textwrap
import warnings
from pathlib import Path

import pytest
from numeric import near
from scipy import stats

from budget.cli import main
from budget.result import Budget

SPEC = textwrap.dedent("""\
    # invented numbers for a CLI test
    [budget]
    title = "CLI test budget (invented numbers)"
    coverage_probability = 0.95

    [model]
    Y = "a + b + c"

    [units]
    Y = "V"

    [monte_carlo]
    trials = 20000
    seed = 12345

    [inputs.a]
    value = 1.0
    standard_uncertainty = 0.3
    unit = "V"
    dof = 10

    [inputs.b]
    value = 2.0
    standard_uncertainty = 0.4
    unit = "V"

    [inputs.c]
    distribution = "rectangular"
    low = -0.5
    high = 0.5
    unit = "V"

    [correlations]
    pairs = [["a", "b", 0.5]]
""")

# DESIGN.md, "Contracts other parts rely on"
# DESIGN.md: the first-round keys plus "warnings" ("Contracts added in the second round")
DESIGN_TOP = {"schema", "measurands", "correlation", "monte_carlo", "inputs", "warnings"}
DESIGN_MEASURAND = {"name", "unit", "value", "standard_uncertainty", "effective_dof",
                    "coverage_factor", "coverage_probability", "expanded_uncertainty", "terms"}
DESIGN_TERM = {"name", "value", "standard_uncertainty", "unit", "distribution", "dof",
               "sensitivity", "contribution", "variance_share"}
DESIGN_MC = {"trials", "value", "standard_uncertainty", "interval_low", "interval_high",
             "interval_kind", "validated", "tolerance", "d_low", "d_high"}
DESIGN_INPUT = {"name", "value", "standard_uncertainty", "unit", "distribution", "dof",
                "evaluation", "source"}


@pytest.fixture
def spec(tmp_path) -> Path:
    p = tmp_path / "spec.toml"
    p.write_text(SPEC, encoding="utf-8")
    return p


def budget_cmd(*args, cwd=None):
    """``python -m budget ARGS`` in a subprocess."""
    return subprocess.run([sys.executable, "-m", "budget", *map(str, args)], capture_output=True,
                          text=True, cwd=cwd, timeout=120)


# --------------------------------------------------------------------------- run
def test_run_prints_the_budget_table(spec, tmp_path, capsys):
    out = tmp_path / "out.json"
    assert main(["run", str(spec), "--json", str(out)]) == 0
    text = capsys.readouterr().out
    # EA-4/02 budget-table columns (quantity X_i, estimate x_i, standard uncertainty u(x_i),
    # probability distribution, sensitivity coefficient c_i, contribution u_i(y)), with the
    # type and ν_i beside u(x_i) and the share u_i²/u_c² drawn as a bar (issue 13)
    for header in ("X_i", "x_i", "u(x_i)", "type", "ν_i", "distribution", "c_i",
                   "u_i(Y) / V", "u_i²/u_c²(Y)"):
        assert header in text
    assert "share of u_c²" not in text and "|c·u|" not in text
    for name in ("a", "b", "c"):
        assert any(line.startswith("  " + name + " ") for line in text.splitlines())
    assert "rectangular" in text
    # By hand: u_c² = 0.3² + 0.4² + 2·0.5·0.3·0.4 + 1/12 = 0.37 + 0.08333 = 0.45333,
    # u_c = 0.6733 V → "0.67" (GUM §7.2.6: two significant digits); U = t_0.975(91)·u_c = 1.337
    # → "1.3" and the value to match: "3.0" (ν_eff = 91.3 below)
    assert "u_c = 0.67 V" in text
    assert "(3.0 ± 1.3) V" in text
    assert "Monte Carlo (20,000 trials" in text
    assert f"record written to {out}" in text


def test_run_record_has_the_design_keys(spec, tmp_path, capsys):
    out = tmp_path / "out.json"
    assert main(["run", str(spec), "--json", str(out)]) == 0
    rec = json.loads(out.read_text(encoding="utf-8"))
    # top level: exactly the DESIGN.md keys plus 'run' (added by the lead: digest, seed, settings)
    assert DESIGN_TOP <= set(rec)
    assert set(rec) - DESIGN_TOP == {"run"}
    assert isinstance(rec["schema"], str)
    (m,) = rec["measurands"]
    assert DESIGN_MEASURAND <= set(m)
    assert set(m) - DESIGN_MEASURAND == {"expression", "second_order_variance",
                                        "coverage_probability_of_k"}
    assert len(m["terms"]) == 3
    for t in m["terms"]:
        assert DESIGN_TERM <= set(t)
        assert set(t) - DESIGN_TERM == {"evaluation", "derivative"}
    (mc,) = rec["monte_carlo"]
    assert DESIGN_MC <= set(mc)
    assert set(mc) - DESIGN_MC == {"measurand", "symmetric_interval", "shortest_interval",
                                   "histogram", "adaptive", "stabilised",
                                   "linear_interval_probability", "verdict", "procedure",
                                   "numerical_accuracy"} | (
                                       {"stop_tolerance"} if mc["adaptive"] else set())
    assert len(rec["inputs"]) == 3
    for q in rec["inputs"]:
        assert set(q) == DESIGN_INPUT
        assert q["evaluation"] in ("A", "B")
    assert rec["correlation"] == {"measurands": ["Y"], "matrix": [[1.0]]}


def test_run_record_numbers(spec, tmp_path, capsys):
    out = tmp_path / "out.json"
    assert main(["run", str(spec), "--json", str(out), "--seed", "7"]) == 0
    rec = json.loads(out.read_text(encoding="utf-8"))
    (m,) = rec["measurands"]
    var = 0.3 ** 2 + 0.4 ** 2 + 2 * 0.5 * 0.3 * 0.4 + 1 / 12      # JCGM 100 eq. (16), by hand
    # Welch–Satterthwaite for correlated inputs (derived in budget/propagate/lpu.py; G.2b for
    # r = I): a's weight is its part of u_c², 0.3·(0.3 + 0.5·0.4) = 0.15, with ν = 10; b and c
    # have ν = ∞
    nu = var ** 2 / (0.15 ** 2 / 10)
    assert m["value"] == near(3.0)
    assert m["standard_uncertainty"] == near(math.sqrt(var), rel=1e-12)
    assert m["effective_dof"] == near(nu, rel=1e-12)
    assert m["coverage_factor"] == near(stats.t.ppf(0.975, math.floor(nu)), rel=1e-12)
    assert m["expanded_uncertainty"] == near(m["coverage_factor"] * math.sqrt(var))
    assert m["unit"] == "V" and m["coverage_probability"] == 0.95
    terms = {t["name"]: t for t in m["terms"]}
    assert terms["c"]["standard_uncertainty"] == near(1 / math.sqrt(12))  # §4.3.7
    assert terms["c"]["distribution"] == "rectangular"
    assert terms["b"]["dof"] is None                       # ν = ∞ is written as null
    assert sum(t["variance_share"] for t in m["terms"]) == near(1.0)
    for t in m["terms"]:
        assert isinstance(t["sensitivity"], float) and t["sensitivity"] == 1.0
        assert t["contribution"] == near(t["standard_uncertainty"])
    assert rec["run"]["seed"] == 7
    assert rec["monte_carlo"][0]["trials"] == 20000
    # the record reads back into the same object (issue 2 item 6: to_dict/from_dict round trip)
    assert Budget.from_dict(rec).to_dict() == rec


def test_no_monte_carlo_and_trials_override(spec, tmp_path, capsys):
    out = tmp_path / "out.json"
    assert main(["run", str(spec), "--json", str(out), "--no-monte-carlo"]) == 0
    assert json.loads(out.read_text())["monte_carlo"] == []
    assert main(["run", str(spec), "--json", str(out), "--trials", "30000"]) == 0
    assert json.loads(out.read_text())["monte_carlo"][0]["trials"] == 30000


# --------------------------------------------------------------------------- determinism
def test_same_seed_gives_a_byte_identical_record(spec, tmp_path, capsys):
    one, two = tmp_path / "one.json", tmp_path / "two.json"
    assert main(["run", str(spec), "--json", str(one), "--seed", "99"]) == 0
    assert main(["run", str(spec), "--json", str(two), "--seed", "99"]) == 0
    assert one.read_bytes() == two.read_bytes()
    three = tmp_path / "three.json"
    assert main(["run", str(spec), "--json", str(three), "--seed", "100"]) == 0
    assert three.read_bytes() != one.read_bytes()


def test_recorded_seed_reproduces_a_seedless_run(tmp_path, capsys):
    # without a seed one is drawn and recorded; running again with it gives the same record
    p = tmp_path / "spec.toml"
    p.write_text(SPEC.replace("seed = 12345\n", ""), encoding="utf-8")
    first, again = tmp_path / "first.json", tmp_path / "again.json"
    assert main(["run", str(p), "--json", str(first)]) == 0
    seed = json.loads(first.read_text())["run"]["seed"]
    assert isinstance(seed, int)
    assert main(["run", str(p), "--json", str(again), "--seed", str(seed)]) == 0
    assert first.read_bytes() == again.read_bytes()


# --------------------------------------------------------------------------- bad input
BAD_SPECS = {
    "unknown key": SPEC.replace("seed = 12345", "sead = 12345"),
    "bad model": SPEC.replace('Y = "a + b + c"', 'Y = "a + b.real"'),
    "unknown name": SPEC.replace('Y = "a + b + c"', 'Y = "a + bb"'),
    "negative u": SPEC.replace("standard_uncertainty = 0.4", "standard_uncertainty = -0.4"),
    "not toml": SPEC.replace("[units]", "[units"),
}


@pytest.mark.parametrize("case", sorted(BAD_SPECS))
def test_bad_spec_exit_2_one_line_no_output(tmp_path, capsys, case):
    p = tmp_path / "spec.toml"
    p.write_text(BAD_SPECS[case], encoding="utf-8")
    out = tmp_path / "out.json"
    assert main(["run", str(p), "--json", str(out)]) == 2
    captured = capsys.readouterr()
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in captured.err
    assert str(p) in lines[0]                  # names the file ...
    if case == "not toml":                     # ... and the line of a syntax error
        assert f"{p}:{SPEC.splitlines().index('[units]') + 1}:" in lines[0]
    else:                                      # ... or the field at fault
        assert "field '" in lines[0]
    assert not out.exists()
    assert captured.out == ""                  # no half-printed table either


@pytest.mark.parametrize("args", [
    ["run", "{spec}", "--trials", "abc"],
    ["run", "{spec}", "--trials", "5"],
    ["run", "{spec}", "--trials", "1000000000000"],
    ["run", "{spec}", "--seed", "-1"],
    ["run", "{spec}", "--seed", "x"],
    ["run", "{tmp}/missing.toml"],
    ["run", "{spec}", "--json", "{tmp}/no/such/folder/out.json"],
    ["run"],
    ["frobnicate"],
])
def test_bad_usage_exit_2_one_line(spec, tmp_path, capsys, args):
    args = [a.format(spec=spec, tmp=tmp_path) for a in args]
    code = main(args + ["--json", str(tmp_path / "out.json")] if args[0] == "run"
                and "--json" not in args else args)
    captured = capsys.readouterr()
    assert code == 2
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in captured.err
    assert not (tmp_path / "out.json").exists()


def test_bad_input_in_a_real_process(tmp_path):
    # what a user sees: exit 2, one line on stderr, no traceback, nothing written
    p = tmp_path / "spec.toml"
    p.write_text(BAD_SPECS["unknown key"], encoding="utf-8")
    r = budget_cmd("run", p, "--json", tmp_path / "out.json")
    assert r.returncode == 2
    assert len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.stderr
    assert "did you mean 'seed'" in r.stderr
    assert not (tmp_path / "out.json").exists()


def test_power_overflow_is_a_clean_error(tmp_path, capsys):
    p = tmp_path / "spec.toml"
    p.write_text(textwrap.dedent("""\
        [model]
        Y = "x ** y"
        [inputs.x]
        value = 1e-100
        standard_uncertainty = 1e-101
        [inputs.y]
        value = -3.0
        standard_uncertainty = 0.1
    """), encoding="utf-8")
    assert main(["run", str(p), "--json", str(tmp_path / "out.json")]) == 2
    assert len(capsys.readouterr().err.strip().splitlines()) == 1


def test_overflowing_uncertainty_is_one_located_error(tmp_path):
    from budget import evaluate, load_spec
    from budget.errors import BudgetError
    p = tmp_path / "spec.toml"
    p.write_text('[model]\nY = "a"\n[inputs.a]\nvalue = 1e308\nstandard_uncertainty = 1e308\n',
                 encoding="utf-8")
    with warnings.catch_warnings(record=True) as seen:
        warnings.simplefilter("always")
        with pytest.raises(BudgetError) as info:
            evaluate(load_spec(p), monte_carlo_enabled=False)
    assert not [w for w in seen if issubclass(w.category, RuntimeWarning)]
    assert info.value.file == str(p) and info.value.line is not None


# --------------------------------------------------------------------------- validate, help
def test_validate_exits_0_and_writes_its_checks(tmp_path):
    out = tmp_path / "checks.json"
    r = budget_cmd("validate", "--json", out)
    assert r.returncode == 0, r.stdout + r.stderr
    checks = json.loads(out.read_text(encoding="utf-8"))
    assert checks and all(c["passed"] for c in checks)
    # issue 2 item 8: these published cases must be among the built-in references
    cases = {c["case"] for c in checks}
    for needed in ("GUM H.2 method 1", "GUM H.2 method 2", "EA-4/02 S3", "JCGM 101 §9.2.2",
                   "JCGM 101 §9.2.3", "GUM Table G.2", "SI 2019"):
        assert needed in cases
    for c in checks:
        assert c["source"]                                    # every check names its source
    # issue 2 item 7: case, source, quantity, published, computed, tolerance, pass
    for word in ("case", "quantity", "published", "computed", "tolerance"):
        assert word in r.stdout
    assert f"{len(checks)} of {len(checks)} checks passed" in r.stdout


def test_module_help():
    r = budget_cmd("--help")                     # `python -m budget --help`
    assert r.returncode == 0
    assert "run" in r.stdout and "validate" in r.stdout


def test_run_help(capsys):
    with pytest.raises(SystemExit) as info:     # argparse ends --help with exit status 0
        main(["run", "--help"])
    assert info.value.code == 0
    out = capsys.readouterr().out
    assert "--json" in out and "--trials" in out and "--seed" in out
