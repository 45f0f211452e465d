"""Property-based fuzzing of the whole CLI (issue 17): specs, CSV files, result records and
argument lists drawn from the documented grammar (README "The budget spec", "Input modules",
"The result record", "Commands and exit codes") plus mutations, run in-process.

For every generated case the contract of DESIGN.md ("Contracts other parts rely on") must hold:

* the exit code is 0, 1 or 2 (never an uncaught exception);
* nothing on stderr is a traceback or a numerical library's raw warning;
* on exit 2, stderr is exactly one line, ``budget: error: ...``;
* on a non-zero exit, no new file or folder is left in the working folder.

The seed is fixed (``derandomize=True``), so CI runs the same cases every time. The number of
cases per property is ``BUDGET_FUZZ_EXAMPLES`` (default: a quick profile for ``make test``);
``make fuzz`` runs the long profile. Every number and name generated is invented.
"""

from __future__ import annotations

import contextlib
import io
import json
import math
import os
import re
import shutil
import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from budget.cli import main

QUICK = int(os.environ.get("BUDGET_FUZZ_EXAMPLES", "0")) or None
FUZZ = settings(derandomize=True, deadline=None, database=None, print_blob=True,
                suppress_health_check=list(HealthCheck))


def _examples(quick: int):
    return settings(FUZZ, max_examples=QUICK or quick)


# ----------------------------------------------------------------------------- running
def run_case(argv: list[str], files: dict[str, str | bytes]) -> tuple[int, str, list[str]]:
    """Run ``budget ARGV`` in a fresh folder holding FILES; check the contract and return
    (exit code, stderr, new paths)."""
    work = Path(tempfile.mkdtemp(prefix="fuzz"))
    old = os.getcwd()
    try:
        for name, data in files.items():
            p = work / name
            p.parent.mkdir(parents=True, exist_ok=True)
            p.write_bytes(data if isinstance(data, bytes) else data.encode("utf-8"))
        before = {str(p.relative_to(work)) for p in work.rglob("*")}
        os.chdir(work)
        out, err = io.StringIO(), io.StringIO()
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            code = main(argv)
        os.chdir(old)
        after = {str(p.relative_to(work)) for p in work.rglob("*")}
    finally:
        os.chdir(old)
        shutil.rmtree(work, ignore_errors=True)
    text = err.getvalue()
    with contextlib.suppress(Exception):  # outside a @given test there is no event log
        event(f"{argv[0]} exit {code}")   # see pytest --hypothesis-show-statistics
    lines = [ln for ln in text.splitlines() if ln.strip()]
    new = sorted(after - before)
    assert code in (0, 1, 2), (code, argv, text)
    assert "Traceback" not in text, text
    # a library's raw warning reads "/path/file.py:123: RuntimeWarning: ..." plus a code line
    assert not re.search(r"\.py:\d+: \w*Warning", text), text
    if code == 2:
        assert len(lines) == 1 and lines[0].startswith("budget: error: "), (argv, text)
    if code != 0:
        assert new == [], (argv, new, text)
    return code, text, new


# ----------------------------------------------------------------------------- values
HUGE = st.sampled_from([10 ** 400, -(10 ** 400), 2 ** 64, 2 ** 63, -(2 ** 63) - 1])
FLOATS = st.one_of(st.floats(allow_nan=True, allow_infinity=True),
                   st.sampled_from([1e308, -1e308, 5e-324, 0.0, -0.0, 1e-300, 1e154]))
NUMBERS = st.one_of(st.integers(-10 ** 6, 10 ** 6), FLOATS, HUGE)
TEXT = st.text(st.characters(codec="utf-8", exclude_categories=("Cs",)), max_size=12)
SCALARS = st.one_of(NUMBERS, TEXT, st.booleans())
VALUES = st.recursive(SCALARS, lambda inner: st.one_of(
    st.lists(inner, max_size=4), st.dictionaries(st.sampled_from(["a", "b", "value", "x"]),
                                                 inner, max_size=3)), max_leaves=6)


def toml_string(text: str) -> str:
    """A TOML basic string (TOML 1.0 "Basic strings": escape ", \\ and control characters)."""
    out = []
    for ch in text:
        if ch in '"\\':
            out.append("\\" + ch)
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04X}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def toml_value(v) -> str:
    """TOML text of a value (our own small writer: strings as JSON-escaped basic strings)."""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return toml_string(v)
    if isinstance(v, list):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{toml_string(k)} = {toml_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(type(v))


# The documented spec grammar (README "The budget spec"): the keys each section knows
SECTION_KEYS = {
    "budget": ["title", "description", "coverage_probability", "propagation_order",
               "dof_rounding", "coverage_factor"],
    "report": ["laboratory", "report_number", "item", "remarks"],
    "units": ["y"],
    "constants": ["n", "c"],
    "monte_carlo": ["trials", "seed", "interval", "significant_digits", "max_trials",
                    "enabled", "t_for_finite_dof"],
    "correlations": ["pairs", "from_observations"],
}
INPUT_KEYS = ["value", "standard_uncertainty", "expanded_uncertainty", "coverage_factor",
              "coverage_probability", "distribution", "low", "high", "half_width", "mode",
              "beta", "dof", "unit", "description", "reason", "source", "evaluation",
              "observations"]
SMALL = st.floats(-1e3, 1e3, allow_nan=False)
POSITIVE = st.floats(1e-6, 10, allow_nan=False)
GOOD_VALUES = {
    "coverage_probability": st.floats(0.5, 0.999), "propagation_order": st.sampled_from([1, 2]),
    "dof_rounding": st.sampled_from(["floor", "interpolate"]),
    "coverage_factor": st.floats(1, 4), "y": st.sampled_from(["A", "V", "1", "µA/A"]),
    "n": st.integers(1, 3), "c": SMALL, "seed": st.integers(0, 2 ** 32),
    "significant_digits": st.integers(1, 4), "max_trials": st.sampled_from([10_000, 10 ** 6]),
    "enabled": st.booleans(), "t_for_finite_dof": st.booleans(),
    "value": SMALL, "standard_uncertainty": POSITIVE, "expanded_uncertainty": POSITIVE,
    "half_width": POSITIVE, "low": st.floats(-10, 0), "high": st.floats(0, 10),
    "mode": st.floats(-1, 1), "beta": st.floats(0, 1), "dof": st.floats(1, 100),
    "unit": st.sampled_from(["1", "V", "Ohm", "Hz"]), "evaluation": st.sampled_from(["A", "B"]),
    "distribution": st.sampled_from(["normal", "rectangular", "triangular", "arcsine",
                                     "trapezoidal", "student-t", "gauss"]),
    "observations": st.lists(st.one_of(SMALL, SMALL, SMALL, NUMBERS), max_size=6),
    "pairs": st.lists(st.tuples(st.sampled_from(["a", "b", "z"]), st.sampled_from(["a", "b"]),
                                st.one_of(st.floats(-1, 1), NUMBERS)).map(list), max_size=2),
    "from_observations": st.lists(st.lists(st.sampled_from(["a", "b"]), max_size=3), max_size=2),
    "trials": st.sampled_from([1000, "adaptive", 999, 10 ** 400]),
    "interval": st.sampled_from(["symmetric", "shortest", "widest"]),
}


def value_for(key: str):
    """Mostly a value the grammar allows for KEY (seven times in eight), else anything."""
    good = GOOD_VALUES.get(key, TEXT)
    return st.integers(0, 7).flatmap(lambda i: VALUES if i == 0 else good)


MODEL = st.one_of(st.sampled_from(["a + b", "a * b", "a / b", "exp(a) * b", "a - 2 * b"]),
                  st.sampled_from(["a + b", "a ** b", "log(a) + b", "sqrt(a - b)",
                                   "1e308 * a * b", "a + ", "__import__('os')", "y2 + a",
                                   "exp(exp(a)) * b", "a / (b - b)"]))


@st.composite
def specs(draw) -> str:
    """A spec from the grammar: the model y over inputs a and b, then random keys."""
    lines = ["[model]", f"y = {toml_value(draw(MODEL))}"]
    for sect, keys in SECTION_KEYS.items():
        if draw(st.booleans()):
            lines.append(f"[{sect}]")
            for k in draw(st.lists(st.sampled_from(keys), max_size=3, unique=True)):
                lines.append(f"{k} = {toml_value(draw(value_for(k)))}")
    for name in ("a", "b"):
        lines.append(f"[inputs.{name}]")
        base = {"value": draw(value_for("value")),
                "standard_uncertainty": draw(value_for("standard_uncertainty"))}
        for k in draw(st.lists(st.sampled_from(INPUT_KEYS), max_size=3, unique=True)):
            base[k] = draw(value_for(k))
        lines += [f"{k} = {toml_value(v)}" for k, v in base.items()]
    return "\n".join(lines) + "\n"


@st.composite
def mutated(draw, text: str) -> str:
    """Character-level mutations of a text: delete, duplicate or insert a line, insert a
    character (control characters included)."""
    lines = text.split("\n")
    for _ in range(draw(st.integers(0, 3))):
        i = draw(st.integers(0, max(len(lines) - 1, 0)))
        op = draw(st.sampled_from(["delete", "duplicate", "insert", "char"]))
        if op == "delete" and lines:
            lines.pop(i)
        elif op == "duplicate" and lines:
            lines.insert(i, lines[i])
        elif op == "insert":
            lines.insert(i, draw(st.sampled_from(['"a\\nb" = 1', "[inputs.\"x\\ty\"]", "x = [",
                                                  "[[model]]", "y = 1", "\ufeff[budget]"])))
        elif lines:
            ln = lines[i]
            j = draw(st.integers(0, len(ln)))
            lines[i] = ln[:j] + draw(st.sampled_from(["\x00", "\x1b", "é", "=", "]", "\"", "9"]))\
                + ln[j:]
    return "\n".join(lines)


@_examples(400)
@given(data=st.data())
def test_fuzz_spec(data):
    spec = data.draw(specs())
    if data.draw(st.booleans()):
        spec = data.draw(mutated(spec))
    run_case(["run", "spec.toml", "--trials", "1000", "--json", "out.json"],
             {"spec.toml": spec})


# ----------------------------------------------------------------------------- CSV files
CELL = st.one_of(st.integers(-5, 5).map(str), FLOATS.map(repr), HUGE.map(str),
                 st.sampled_from(["", " ", "nan", "inf", "on", "off", "1", "0", "2026-01-05",
                                  "2026-13-45", "1e400", "-1e308", "x", "\"", "1,2"]))


def _cycles(i, seg, x):
    return [f"{i * 2.0:g}", repr(1e-3 * (1 if (i // seg) % 2 else 0) + x),
            "on" if (i // seg) % 2 else "off"]


def _history(i, seg, x):
    return [f"{2020 + i // 4:04d}-{1 + 3 * (i % 4):02d}-15", repr(1e9 * (1 + 1e-7 * (i + x))),
            "200", "2"]


def _voltmeter(i, seg, x):
    v = -0.2 + 0.05 * i
    return [f"{v:.3f}", repr(v * (1 + 1e-6) + 1e-9 * x)]


def _frequency(i, seg, x):
    return [f"{2024 + i // 12:04d}-{1 + i % 12:02d}-01", repr(1e-11 * (i + x)), "1e-12"]


# The documented file formats (README "Input modules"): header, a row maker, spec options
MODULE_FILES = {
    "cycles": ("time_s,reading,pump", _cycles, 'settle_s = 0\nunit = "V"'),
    "resistor": ("date,value,expanded_uncertainty,coverage_factor", _history,
                 'at = "2026-06-01"\nalpha = 1e-6\ntemperature_C = 23.1\n'
                 "temperature_uncertainty_C = 0.01\nreference_temperature_C = 23.0"),
    "voltmeter": ("reference_V,reading_V", _voltmeter, "working_voltage_V = 0.1"),
    "frequency": ("date,fractional_offset,uncertainty", _frequency,
                  'nominal_Hz = 6e8\nat = "2026-06-01"'),
}
OPTION_EDITS = st.sampled_from(["", "settle_s = 1e308", "alpha = 1e308",
                                "temperature_half_width_C = 1e308", "at = 2026",
                                "working_voltage_V = -1e308", "nominal_Hz = 1e400",
                                "drift = \"constant\"", "exclude_rows = [1, 99]"])


@st.composite
def csv_cases(draw):
    """A table in a module's documented format, then a few cells or lines mutated."""
    module = draw(st.sampled_from(sorted(MODULE_FILES)))
    header, row, options = MODULE_FILES[module]
    n = draw(st.integers(2, 30))
    seg = draw(st.integers(1, 6))
    noise = draw(st.lists(st.floats(-1, 1), min_size=n, max_size=n))
    rows = [row(i, seg, noise[i]) for i in range(n)]
    for _ in range(draw(st.integers(0, 3))):
        i = draw(st.integers(0, n - 1))
        j = draw(st.integers(0, len(rows[i]) - 1))
        rows[i][j] = draw(CELL)
    text = header + "\n" + "\n".join(",".join(r) for r in rows) + "\n"
    if draw(st.integers(0, 3)) == 0:
        text = draw(mutated(text))
    if module == "frequency":
        options += "\n" + 'allan_deviation = 1e-11\nallan_tau_s = 1\nmeasurement_time_s = 100'
    options = options.replace("settle_s = 0", "settle_s = 0") + "\n" + draw(OPTION_EDITS)
    spec = (f'[model]\ny = "a"\n[monte_carlo]\nenabled = false\n[inputs.a]\nmodule = '
            f'"{module}"\nfile = "data.csv"\n{options}\n')
    return spec, text


@_examples(250)
@given(case=csv_cases())
def test_fuzz_csv(case):
    spec, csv = case
    run_case(["run", "spec.toml", "--json", "out.json"], {"spec.toml": spec, "data.csv": csv})


# ----------------------------------------------------------------------------- records
_RECORD: dict = {}


def valid_record() -> dict:
    """One real record (typed-in inputs, invented numbers), made once per session."""
    if not _RECORD:
        spec = ('[budget]\ntitle = "fuzz base (invented)"\n[model]\ny = "a * b"\n'
                "[monte_carlo]\ntrials = 1000\nseed = 7\n[inputs.a]\nvalue = 2.0\n"
                'standard_uncertainty = 0.1\n[inputs.b]\nvalue = 3.0\ndistribution = '
                '"rectangular"\nhalf_width = 0.2\n[correlations]\npairs = [["a", "b", 0.1]]\n')
        work = Path(tempfile.mkdtemp(prefix="fuzzrec"))
        try:
            (work / "s.toml").write_text(spec, encoding="utf-8")
            with contextlib.redirect_stdout(io.StringIO()):
                assert main(["run", str(work / "s.toml"), "--json", str(work / "r.json")]) == 0
            _RECORD.update(json.loads((work / "r.json").read_text("utf-8")))
        finally:
            shutil.rmtree(work, ignore_errors=True)
    return json.loads(json.dumps(_RECORD))


def _paths(obj, prefix=()):
    yield prefix
    if isinstance(obj, dict):
        for k, v in obj.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(obj, list):
        for i, v in enumerate(obj):
            yield from _paths(v, prefix + (i,))


def _replace(obj, path, value, delete=False):
    if not path:
        return value
    parent = obj
    for p in path[:-1]:
        parent = parent[p]
    if delete:
        del parent[path[-1]]
    else:
        parent[path[-1]] = value
    return obj


def _json_text(v) -> str:
    return json.dumps(v, ensure_ascii=False, allow_nan=True)


@st.composite
def records(draw) -> str:
    rec = valid_record()
    for _ in range(draw(st.integers(1, 3))):
        paths = list(_paths(rec))
        path = draw(st.sampled_from(paths))
        delete = bool(path) and draw(st.booleans()) and draw(st.booleans())
        rec = _replace(rec, path, draw(VALUES), delete=delete)
    text = _json_text(rec)
    if draw(st.integers(0, 5)) == 0:
        text = draw(mutated(text))
    return text


@_examples(250)
@given(rec=records(), command=st.sampled_from(["report", "explain", "compare", "explain-term"]))
def test_fuzz_record(rec, command):
    argv = {"report": ["report", "--record", "rec.json", "--html", "out.html"],
            "explain": ["explain", "--record", "rec.json"],
            "explain-term": ["explain", "--record", "rec.json", "a", "--json", "e.json"],
            "compare": ["compare", "rec.json", "good.json", "--json", "c.json"]}[command]
    run_case(argv, {"rec.json": rec, "good.json": _json_text(valid_record())})


# ----------------------------------------------------------------------------- arguments
COMMANDS = ["run", "validate", "report", "explain", "compare", "pump", "identity", "sign",
            "verify", "bogus"]
OPTIONS = ["--json", "--trials", "--seed", "--no-monte-carlo", "--archive", "--force-archive",
           "-o", "--html", "--record", "--certificate", "--force", "--measurand", "--reference",
           "--pairwise", "--pdf", "--model", "--plateau", "--operating-point", "--samples",
           "--figures", "--write-fit", "--identity", "--spec", "--trust", "--inputs", "fit",
           "create", "--name", "--out", "--help", "--version"]
WORDS = st.one_of(st.sampled_from(OPTIONS), st.sampled_from(
    ["spec.toml", "rec.json", "out.json", "x" * 300, "r" * 250 + ".json", "0", "-1", "1e308",
     "1e400", "adaptive", str(10 ** 400), "nan", "", "missing.csv", "a", "dir", "dir/out.json",
     "out.pdf", "\x1b[31m", "a\nb"]), TEXT)
ARG_SPEC = ('[model]\ny = "a"\n[monte_carlo]\ntrials = 1000\nseed = 1\n[inputs.a]\n'
            "value = 1.0\nstandard_uncertainty = 0.1\n")


@_examples(500)
@given(argv=st.tuples(st.sampled_from(COMMANDS), st.lists(WORDS, max_size=6)))
def test_fuzz_arguments(argv):
    command, rest = argv
    if command in ("identity", "sign") or "--help" in rest or "--version" in rest:
        # identity create prompts for a passphrase; --help/--version exit through SystemExit 0
        rest = [w for w in rest if w not in ("--help", "--version", "create")]
    if command == "report" and ("-o" in rest or "--certificate" in rest):
        rest = [w for w in rest if w not in ("-o", "--certificate")]  # PDF rendering: slow
    os.environ.pop("BUDGET_PASSPHRASE", None)
    run_case([command, *rest], {"spec.toml": ARG_SPEC, "rec.json": _json_text(valid_record()),
                                "dir/.keep": ""})


@pytest.mark.parametrize("name", ["x" * 300, "r" * 251 + ".json"])
def test_long_names_every_output_option(name):
    # the example of class 4 as a fixed case next to the generated ones
    for opt in ("--json", "--archive"):
        run_case(["run", "spec.toml", opt, name], {"spec.toml": ARG_SPEC})
