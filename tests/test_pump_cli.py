"""``budget pump fit``: report, fit-result file, figures, and one-line errors with exit code 2.

Contract: DESIGN.md (exit codes 0/2, one line on stderr naming file and field, no output file on
error). Data are synthetic, generated here with fixed seeds by tests/pump_sim.py (the published
formulas written out independently of the package's models).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from pump_sim import escape_mean, escape_taus, staircase

from budget.cli import main


def scan(tmp_path: Path) -> Path:
    rng = np.random.default_rng(61)
    v = np.linspace(-0.64, -0.50, 141)
    y = staircase(v, 300.0, (-0.60, -0.5333)) + rng.normal(0, 1e-4, v.size)
    f = tmp_path / "scan.csv"
    f.write_text("# synthetic\ngate_voltage,n_mean,n_std\n" + "".join(
        f"{float(a)!r},{float(b)!r},0.0001\n" for a, b in zip(v, y)))
    return f


def record(tmp_path: Path) -> Path:
    rng = np.random.default_rng(62)
    v = np.repeat(np.linspace(-0.34, -0.26, 3), 14)
    t = np.tile(np.geomspace(2e-9, 1.5e-5, 14), 3)
    y = escape_mean(escape_taus([1e-8, 4e-7], 30.0, v, -0.3), t)
    y = y + rng.normal(0, 2e-3, y.size)
    f = tmp_path / "esc.csv"
    f.write_text("hold_time_s,gate_voltage,n_mean,n_std\n" + "".join(
        f"{float(a)!r},{float(b)!r},{float(c)!r},0.002\n" for a, b, c in zip(t, v, y)))
    return f


def test_cascade_report_fit_file_and_figures(tmp_path, capsys):
    f = scan(tmp_path)
    figs = tmp_path / "figs"
    figs.mkdir()
    out = tmp_path / "fit.toml"
    rc = main(["pump", "fit", str(f), "--model", "decay-cascade", "--operating-point", "-0.545",
               "--figures", str(figs), "--write-fit", str(out)])
    text = capsys.readouterr().out
    assert rc == 0
    assert "[5] Predicted error at the operating point" in text
    assert "[8] Fit result file" in text
    assert sorted(p.name for p in figs.iterdir()) == ["pump_error.svg", "pump_fit.svg",
                                                      "pump_residuals.svg"]
    assert (figs / "pump_error.svg").read_text().lstrip().startswith("<?xml")
    # the written file reports the same term
    assert main(["pump", "fit", str(out)]) == 0
    again = capsys.readouterr().out
    line = next(ln for ln in text.splitlines() if ln.startswith("δ (sampled)"))
    assert line in again


def test_escape_report_without_operating_point(tmp_path, capsys):
    rc = main(["pump", "fit", str(record(tmp_path)), "--model", "sequential-escape",
               "--plateau", "1", "--hold-time", "1e-7", "--shared-slope"])
    text = capsys.readouterr().out
    assert rc == 0
    assert "no operating point given" in text
    assert "P(n ejected)" in text


def test_errors_are_one_line_with_exit_2(tmp_path, capsys):
    f = scan(tmp_path)
    out = tmp_path / "never.toml"
    cases = [
        (["pump", "fit", str(f)], "--model"),
        (["pump", "fit", str(f), "--model", "decay-cascade", "--operating-point", "0.2",
          "--write-fit", str(out)], "--allow-extrapolation"),
        (["pump", "fit", str(tmp_path / "none.csv"), "--model", "decay-cascade"], "not found"),
        (["pump", "fit", str(f), "--model", "decay-cascade", "--figures",
          str(f)], "is not a folder"),
        (["pump", "fit", str(f), "--model", "decay-cascade", "--hold-time", "1e-7"],
         "--hold-time"),
    ]
    for argv, expect in cases:
        assert main(argv) == 2
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and expect in err[0] and "Traceback" not in err[0]
    assert not out.exists()


def test_missing_output_folders_are_created(tmp_path, capsys):
    # issue 13 item 8: the folders of --figures and --write-fit are created (and only then)
    f = scan(tmp_path)
    figs, fit = tmp_path / "out" / "figs", tmp_path / "out" / "fits" / "plateau.toml"
    assert main(["pump", "fit", str(f), "--model", "decay-cascade", "--figures", str(figs),
                 "--write-fit", str(fit)]) == 0
    assert fit.is_file() and any(figs.glob("*.svg"))
    # a refusal after the folders' check leaves none behind
    assert main(["pump", "fit", str(f), "--model", "decay-cascade", "--hold-time", "1e-7",
                 "--figures", str(tmp_path / "never" / "figs")]) == 2
    assert not (tmp_path / "never").exists()
