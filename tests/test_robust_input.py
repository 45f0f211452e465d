"""Hostile and careless input (issue 17): huge numbers, wrong types, long names, line breaks in
names, numerical-library warnings, commands without their ACTION.

Every case runs the CLI in-process and checks the contract of DESIGN.md ("Contracts other parts
rely on"): exit 2, exactly one line on stderr naming file, line and field, no traceback, nothing
written. Numbers: the largest float64 is (2 − 2⁻⁵²)·2¹⁰²³ ≈ 1.797e308 (IEEE 754-2019 §3.6,
binary64: emax = 1023, p = 53), so a 400-digit integer or 1e308·1e308 cannot be a float; a file
name on Linux file systems (ext4, tmpfs) is at most 255 bytes, NAME_MAX (POSIX
``pathconf(_PC_NAME_MAX)``; common practice).
"""

from __future__ import annotations

import os
import sys

import pytest

from budget.cli import main
from budget.numbers import NumberError, checked, escape, shown

BIG = "1" + "0" * 400          # a TOML/JSON integer with 401 digits: no float holds it

BASE = """[budget]
title = "robustness case (invented)"

[model]
y = "a + b"

[monte_carlo]
trials = 1000
seed = 1

[inputs.a]
value = 1.0
standard_uncertainty = 0.1

[inputs.b]
value = 2.0
distribution = "rectangular"
half_width = 0.5
"""


def run_cli(tmp_path, monkeypatch, capsys, args, files=None):
    """Run ``budget ARGS`` in tmp_path; return (code, stderr lines, new files)."""
    for name, text in (files or {}).items():
        (tmp_path / name).write_text(text, encoding="utf-8")
    before = set(tmp_path.rglob("*"))
    monkeypatch.chdir(tmp_path)
    code = main(args)
    err = capsys.readouterr().err
    new = sorted(str(p.relative_to(tmp_path)) for p in set(tmp_path.rglob("*")) - before)
    return code, [ln for ln in err.splitlines() if ln.strip()], new


def assert_refused(result, *needles):
    code, lines, new = result
    assert code == 2, lines
    assert len(lines) == 1, lines
    assert "Traceback" not in lines[0]
    assert new == [], new
    for n in needles:
        assert n in lines[0], lines[0]
    return lines[0]


# ------------------------------------------------------------------ class 1: huge numbers
@pytest.mark.parametrize("edit, field, line", [
    (("half_width = 0.5", f"half_width = {BIG}"), "inputs.b.half_width", 18),
    (('title = "robustness case (invented)"',
      f'title = "robustness case (invented)"\ncoverage_probability = {BIG}'),
     "budget.coverage_probability", 3),
    (("value = 1.0", f"value = {BIG}"), "inputs.a.value", 12),
    (("standard_uncertainty = 0.1", f"standard_uncertainty = 0.1\ndof = {BIG}"),
     "inputs.a.dof", 14),
    (("seed = 1", f"seed = {BIG}"), "monte_carlo.seed", 9),
])
def test_huge_integer_is_refused_at_its_key(tmp_path, monkeypatch, capsys, edit, field, line):
    spec = BASE.replace(*edit)
    msg = assert_refused(run_cli(tmp_path, monkeypatch, capsys,
                                 ["run", "spec.toml", "--json", "out.json"],
                                 {"spec.toml": spec}), f"field '{field}'", f"spec.toml:{line}:")
    assert "401 digits" in msg or "must be" in msg
    assert len(msg) < 300  # the 401 digits themselves are not printed


def test_huge_correlation_coefficient(tmp_path, monkeypatch, capsys):
    spec = BASE + f'\n[correlations]\npairs = [["a", "b", {BIG}]]\n'
    assert_refused(run_cli(tmp_path, monkeypatch, capsys, ["run", "spec.toml"],
                           {"spec.toml": spec}), "correlations.pairs", "entry 1, item 3")


def test_observations_that_overflow_the_standard_deviation(tmp_path, monkeypatch, capsys):
    # s² of ±1e308 is about 1e616 > 1.8e308 (IEEE 754 binary64): overflow, not inf
    spec = BASE.replace("value = 1.0\nstandard_uncertainty = 0.1",
                        "observations = [1e308, -1e308, 1e308]")
    assert_refused(run_cli(tmp_path, monkeypatch, capsys, ["run", "spec.toml"],
                           {"spec.toml": spec}), "inputs.a.observations", "overflows")


def test_monte_carlo_near_the_largest_float(tmp_path, monkeypatch, capsys):
    # −1e308 ± 1 plus b: the mean of the samples overflows in the summation (IEEE 754)
    spec = BASE.replace("value = 1.0\nstandard_uncertainty = 0.1",
                        "value = -1.7e308\nstandard_uncertainty = 1e300")
    code, lines, new = run_cli(tmp_path, monkeypatch, capsys, ["run", "spec.toml"],
                               {"spec.toml": spec})
    assert code in (0, 2) and new == []
    assert all("RuntimeWarning" not in ln and "Traceback" not in ln for ln in lines)
    if code == 2:
        assert len(lines) == 1


# temperature_half_width_C = 1e308 and compare --reference 0 1e308: tests/bad_inputs/
# resistor_temperature_overflow and args_compare_reference_overflow


@pytest.mark.parametrize("argv, needle", [
    (["run", "spec.toml", "--trials", BIG], "--trials"),
    (["run", "spec.toml", "--seed", BIG], "--seed"),
    (["run", "spec.toml", "--seed", "-1"], "'-1'"),
    (["compare", "a.json", "--reference", "0", "1e400"], "--reference"),
])
def test_number_arguments(tmp_path, monkeypatch, capsys, argv, needle):
    msg = assert_refused(run_cli(tmp_path, monkeypatch, capsys, argv, {"spec.toml": BASE}),
                         needle)
    assert len(msg) < 300


def test_checked_conversion():
    # IEEE 754 binary64 limits (see module docstring)
    assert checked(1.7976931348623157e308) == sys.float_info.max
    with pytest.raises(NumberError, match="too large"):
        checked(2 ** 1024)
    with pytest.raises(NumberError, match="must be a number"):
        checked(True)
    with pytest.raises(NumberError, match="finite"):
        checked(float("nan"))
    with pytest.raises(NumberError, match=r"in \(0, 1\)"):
        checked(1.0, lo=0, hi=1, lo_open=True, hi_open=True)
    assert "401 digits" in shown(int(BIG))


# ------------------------------------------------------------------ class 2: wrong types
@pytest.mark.parametrize("extra, field", [
    ("\n[correlations]\npairs = 1000000\n", "correlations.pairs"),
    ('\n[correlations]\npairs = [["a", 3, 0.5]]\n', "correlations.pairs"),
    ('\n[correlations]\nfrom_observations = "a"\n', "correlations.from_observations"),
    ('\n[units]\ny = 3\n', "units.y"),
    ('\n[report]\nlaboratory = ["x"]\n', "report.laboratory"),
])
def test_wrong_types_in_spec_tables(tmp_path, monkeypatch, capsys, extra, field):
    assert_refused(run_cli(tmp_path, monkeypatch, capsys, ["run", "spec.toml"],
                           {"spec.toml": BASE + extra}), f"field '{field}'", "must be")


# ------------------------------------------------------------------ class 4: long names
@pytest.mark.parametrize("argv", [
    ["run", "x" * 300],
    ["run", "spec.toml", "--json", "x" * 300],
    ["run", "spec.toml", "--archive", "x" * 300],
    ["explain", "--record", "x" * 300],
    ["report", "--record", "x" * 300, "-o", "r.pdf"],
    ["pump", "fit", "x" * 300, "--model", "decay-cascade"],
    ["sign", "in.pdf", "--identity", "x" * 300, "-o", "s.pdf", "--record", "r.json",
     "--spec", "spec.toml"],
    ["verify", "x" * 300, "--trust", "t.pem"],
])
def test_long_file_names(tmp_path, monkeypatch, capsys, argv):
    assert_refused(run_cli(tmp_path, monkeypatch, capsys, argv, {"spec.toml": BASE}))


@pytest.mark.parametrize("length", [240, 245, 250, 255])
def test_output_name_near_the_limit_is_written(tmp_path, monkeypatch, capsys, length):
    # a name the folder accepts must not fail in the atomic writer's temporary name
    name = "r" * (length - 5) + ".json"
    code, lines, new = run_cli(tmp_path, monkeypatch, capsys,
                               ["run", "spec.toml", "--json", name, "--archive", "a" * length],
                               {"spec.toml": BASE})
    assert code == 0, lines
    assert sorted(new)[-1].startswith("r") and name in new
    assert "a" * length in new


def test_every_os_error_is_one_line(tmp_path, monkeypatch, capsys):
    if os.geteuid() == 0:
        # root ignores permission bits; a folder given as the spec still fails with EISDIR
        (tmp_path / "d.toml").mkdir()
        assert_refused(run_cli(tmp_path, monkeypatch, capsys, ["run", "d.toml"]))
        return
    (tmp_path / "spec.toml").write_text(BASE)
    os.chmod(tmp_path / "spec.toml", 0)
    assert_refused(run_cli(tmp_path, monkeypatch, capsys, ["run", "spec.toml"]))


# ------------------------------------------------------------------ class 5: one line
def test_line_break_in_an_input_name_is_escaped_and_located(tmp_path, monkeypatch, capsys):
    spec = BASE.replace("[inputs.b]", '[inputs."b\\nc"]')
    msg = assert_refused(run_cli(tmp_path, monkeypatch, capsys, ["run", "spec.toml"],
                                 {"spec.toml": spec}), "\\n")
    assert "spec.toml:15:" in msg  # the header of that table


def test_line_break_in_a_key_points_at_the_key(tmp_path, monkeypatch, capsys):
    spec = BASE.replace("half_width = 0.5", 'half_width = 0.5\n"half\\nwidth" = 1')
    msg = assert_refused(run_cli(tmp_path, monkeypatch, capsys, ["run", "spec.toml"],
                                 {"spec.toml": spec}), "half\\nwidth")
    assert "spec.toml:19:" in msg


def test_escape_shows_control_characters():
    # repr() escapes (Python language reference, "String and Bytes literals")
    assert escape("a\nb\x1b\u2028") == "a\\nb\\x1b\\u2028"


@pytest.mark.parametrize("group, action", [("pump", "fit"), ("identity", "create")])
def test_group_without_action(tmp_path, monkeypatch, capsys, group, action):
    assert_refused(run_cli(tmp_path, monkeypatch, capsys, [group]), "ACTION", action)


def test_numpy_warnings_never_printed_raw(tmp_path, monkeypatch, capsys):
    # a run whose inputs are extreme but valid: whatever numpy warns, stderr holds only the
    # project's own lines
    spec = BASE.replace("value = 1.0\nstandard_uncertainty = 0.1",
                        "observations = [1e300, -1e300, 3e300]")
    code, lines, new = run_cli(tmp_path, monkeypatch, capsys, ["run", "spec.toml"],
                               {"spec.toml": spec})
    assert code in (0, 2)
    assert all(ln.startswith("budget: ") for ln in lines), lines
