"""Structured warnings: the dataclass, their way from a module into the record, the terminal
(stderr, after the table) and ``budget sign``'s refusal of unresolved errors.

References: the record contract of /work/shared/DESIGN.md ("Contracts added in the second
round": top-level ``warnings`` with ``code``, ``input``, ``severity``, ``message``). The
calibration history is synthetic (tests/test_resistor.py's generator): its last calibration
is on 2025-10-... (12 calibrations 91 days apart from 2023-01-15), so a prediction at
2026-02-01 is an extrapolation by construction.
"""

from __future__ import annotations

import json

import pytest

from budget import cli
from budget.engine import evaluate
from budget.errors import DataError
from budget.record import load_record, record_from_text
from budget.spec import load_spec
from budget.warnings import Warning, errors_of, unique, warn, with_input
from tests.test_resistor import write_history

SPEC = """\
[budget]
title = "Warnings test (invented numbers)"

[model]
I = "V / R"

[monte_carlo]
trials = 2000
seed = 1

[inputs.V]
value = 1.0
standard_uncertainty = 1e-7
unit = "V"

[inputs.R]
module = "resistor"
file = "hist.csv"
at = "2026-02-01T14:00"
"""


def test_warning_dict_round_trip_and_checks():
    w = warn("cycles.transient", "a settling transient remains", input="dV")
    assert Warning.from_dict(w.to_dict()) == w
    assert w.to_dict() == {"code": "cycles.transient", "input": "dV", "severity": "warning",
                           "message": "a settling transient remains"}
    assert w.line() == "warning [cycles.transient] dV: a settling transient remains"
    with pytest.raises(ValueError):
        warn("x", "m", severity="fatal")       # only note / warning / error
    with pytest.raises(ValueError):
        warn("Not A Code", "m")
    e = warn("a.b", "m", severity="error")
    assert errors_of([w, e]) == (e,)
    assert unique([w, w, e]) == (w, e)
    assert with_input([warn("a.b", "m")], "R")[0].input == "R"


@pytest.fixture()
def folder(tmp_path):
    write_history(tmp_path)
    (tmp_path / "spec.toml").write_text(SPEC, encoding="utf-8")
    return tmp_path


def test_module_warning_reaches_budget_and_record(folder):
    b = evaluate(load_spec(folder / "spec.toml"))
    codes = {(w.code, w.input) for w in b.warnings}
    assert ("history.extrapolation", "R") in codes
    d = json.loads(b.to_json())
    assert d["warnings"] and d["warnings"][0]["input"] == "R"
    assert list(d)[:6] == ["schema", "measurands", "correlation", "monte_carlo", "inputs",
                           "warnings"]
    back = record_from_text(b.to_json())
    assert back.warnings == b.warnings


def test_run_prints_warnings_on_stderr_after_table(folder, capsys, tmp_path):
    out = tmp_path / "rec.json"
    assert cli.main(["run", str(folder / "spec.toml"), "--json", str(out)]) == 0
    o, e = capsys.readouterr()
    assert "history.extrapolation" not in o          # the table stays on stdout, clean
    assert "warning [history.extrapolation] R:" in e
    assert "days past the last calibration" in e
    assert "extrapolates" not in o                    # not repeated as a note in the table
    assert json.loads(out.read_text())["warnings"][0]["code"] == "history.extrapolation"
    assert cli.main(["explain", "--record", str(out)]) == 0
    assert "history.extrapolation" in capsys.readouterr().err


def test_record_with_bad_warning_refused(folder, tmp_path):
    b = evaluate(load_spec(folder / "spec.toml"))
    d = b.to_dict()
    d["warnings"][0]["severity"] = "fatal"
    p = tmp_path / "r.json"
    p.write_text(json.dumps(d))
    with pytest.raises(DataError, match="warnings"):
        load_record(p)
    del d["warnings"][0]["message"]
    p.write_text(json.dumps(d))
    with pytest.raises(DataError, match=r"warnings\[0\]\.message"):
        load_record(p)


def test_sign_refuses_error_warning_unless_accepted(tmp_path, capsys, monkeypatch):
    from budget import signing
    from tests.evidence_helpers import PASSPHRASE, make_pdf, write_spec_folder
    spec = write_spec_folder(tmp_path / "lab")
    d = evaluate(load_spec(spec)).to_dict()
    # a record whose evaluation left an error (as settle_policy = "refuse" or a degenerate
    # fit would); hand-made here so the test does not depend on any one module's rule
    d["warnings"] = [warn("cycles.transient", "a settling transient remains", input="dV",
                          severity="error").to_dict()]
    rec = tmp_path / "record.json"
    rec.write_text(json.dumps(d), encoding="utf-8")
    ident = signing.create_identity("Ada Quill", "Head of laboratory", tmp_path / "id",
                                    PASSPHRASE)
    (tmp_path / "report.pdf").write_bytes(make_pdf())
    monkeypatch.setenv("BUDGET_PASSPHRASE", PASSPHRASE)
    argv = ["sign", str(tmp_path / "report.pdf"), "--identity", str(ident.p12_path), "-o",
            str(tmp_path / "signed.pdf"), "--spec", str(spec), "--record", str(rec)]
    assert cli.main(argv) == 2
    e = capsys.readouterr().err
    assert e.strip().count("\n") == 0          # one line (DESIGN.md exit-code contract)
    assert "error [cycles.transient] dV" in e and "--accept-warnings" in e
    assert not (tmp_path / "signed.pdf").exists()
    assert cli.main(argv + ["--accept-warnings", "--reason", "approved"]) == 0
    import pypdf
    r = pypdf.PdfReader(tmp_path / "signed.pdf")
    sig = r.get_fields()
    reasons = [str(f.get("/V", {}).get("/Reason", "")) for f in sig.values()]
    assert any("accepted warnings: cycles.transient (dV)" in x for x in reasons), reasons


def test_monte_carlo_u_of_a_t_input_with_two_dof_is_undefined(tmp_path):
    # review finding: three readings give ν = 2; JCGM 101 §6.4.9 draws the input from a scaled
    # t_2, whose variance ν/(ν − 2) is infinite (handbook property of Student's t, common
    # knowledge), so the trials' standard deviation estimates nothing
    from budget.spec import parse_spec
    spec = parse_spec('[budget]\ntitle = "t2 (invented)"\n[model]\nY = "X"\n'
                      '[monte_carlo]\ntrials = 20000\nseed = 3\n'
                      '[inputs.X]\nobservations = [10.01, 10.02, 10.0235]\n')
    codes = [w.code for w in evaluate(spec).warnings]
    assert "monte_carlo.u_undefined" in codes
    # four readings: ν = 3, the variance 3 s² is finite: no such warning
    spec4 = parse_spec('[budget]\ntitle = "t3 (invented)"\n[model]\nY = "X"\n'
                       '[monte_carlo]\ntrials = 20000\nseed = 3\n'
                       '[inputs.X]\nobservations = [10.01, 10.02, 10.0235, 10.015]\n')
    assert "monte_carlo.u_undefined" not in [w.code for w in evaluate(spec4).warnings]


def test_every_warning_code_in_the_readme_is_raised_somewhere():
    # the README's severity table is the user's list of codes to look for; a code named there
    # that no module raises any more (two were withdrawn this round) would send an auditor
    # looking for a check that does not exist (project contract, README "Warnings")
    import re
    from pathlib import Path
    root = Path(__file__).resolve().parents[1]
    rows = [ln for ln in (root / "README.md").read_text(encoding="utf-8").splitlines()
            if ln.startswith(("| `note`", "| `warning`"))]
    codes = set(re.findall(r"`([a-z_]+\.[a-z_]+)`", "\n".join(rows)))
    assert len(codes) >= 10                 # the table is found and lists the codes
    source = "\n".join(p.read_text(encoding="utf-8") for p in (root / "budget").rglob("*.py"))
    assert sorted(c for c in codes if f'"{c}"' not in source) == []


def test_every_warning_code_raised_is_in_the_readme_table():
    # the other direction: a code a module raises that the README's table does not list leaves
    # the user without its meaning (issue 12). Raised = the first argument of a warn(...) call,
    # or a (text, code, severity) table entry such as the pump module's note-to-warning map,
    # read from the syntax trees of budget/.
    import ast
    import re
    from pathlib import Path
    root = Path(__file__).resolve().parents[1]
    code_re = re.compile(r"^[a-z][a-z0-9_]*(\.[a-z0-9_]+)+$")
    raised = set()
    for path in (root / "budget").rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Call) and getattr(node.func, "id", None) == "warn" \
                    and node.args and isinstance(node.args[0], ast.Constant):
                raised.add(node.args[0].value)
            elif isinstance(node, ast.Tuple) and len(node.elts) == 3 and all(
                    isinstance(e, ast.Constant) and isinstance(e.value, str) for e in node.elts) \
                    and node.elts[2].value in ("note", "warning", "error") \
                    and code_re.match(node.elts[1].value):
                raised.add(node.elts[1].value)
    assert {"cycles.glitch", "pump.degenerate_fit", "pump.plateau_mismatch"} <= raised
    rows = [ln for ln in (root / "README.md").read_text(encoding="utf-8").splitlines()
            if ln.startswith(("| `note`", "| `warning`", "| `error`"))]
    listed = set(re.findall(r"`([a-z_]+\.[a-z_]+)`", "\n".join(rows)))
    assert sorted(raised - listed) == []
