"""The fixed-section text report and figure data of a pump analysis (library side of
``budget pump fit``). Checked against the project's own contracts: the section list of
budget/text/pump_text.py, the fit-result format of budget/inputs/pump/fitfile.py and the
figure-dict format checked by budget/report/figures.check_figure. Data are synthetic.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

import numpy as np
from pump_sim import escape_mean, escape_taus, staircase
from scipy import constants

from budget.inputs.pump.analysis import add_thermal_check, analyse_data, analyse_fit_file
from budget.inputs.pump.figdata import figure_data
from budget.inputs.pump.fitfile import record_from_dict
from budget.report.figures import check_figure
from budget.text.pump_text import SECTIONS, fit_report


def cascade_analysis(tmp_path: Path):
    rng = np.random.default_rng(51)
    v = np.linspace(-0.64, -0.50, 141)
    y = staircase(v, 300.0, (-0.60, -0.5333)) + rng.normal(0, 1e-4, v.size)
    f = tmp_path / "scan.csv"
    f.write_text("gate_voltage,n_mean\n" + "".join(f"{float(a)!r},{float(b)!r}\n"
                                                   for a, b in zip(v, y)))
    return analyse_data(f, model="decay-cascade", plateau=1, operating_point=-0.545,
                        samples=2000)


def escape_analysis(tmp_path: Path):
    rng = np.random.default_rng(52)
    t = np.geomspace(2e-9, 1.5e-5, 30)
    y = escape_mean(escape_taus([1e-8, 2e-6], 0.0, np.zeros(t.size), 0.0), t) + \
        rng.normal(0, 2e-3, t.size)
    f = tmp_path / "esc.csv"
    f.write_text("hold_time_s,n_mean\n" + "".join(f"{float(a)!r},{float(b)!r}\n"
                                                  for a, b in zip(t, y)))
    return analyse_data(f, model="sequential-escape", plateau=1, hold_time=2e-7, samples=2000)


def _section_text(report: str, i: int) -> str:
    start = report.index(f"[{i}] {SECTIONS[i - 1]}")
    end = report.index(f"[{i + 1}] ", start) if i < len(SECTIONS) else len(report)
    return report[start:end]


def test_sections_in_fixed_order_for_both_models(tmp_path):
    for a in (cascade_analysis(tmp_path), escape_analysis(tmp_path)):
        rep = fit_report(a)
        positions = [rep.index(f"[{i}] {title}") for i, title in enumerate(SECTIONS, start=1)]
        assert positions == sorted(positions)
        assert "model extrapolation, not a measurement" in rep
        params = _section_text(rep, 2)
        for name in a.record.names:
            assert name in params
        assert "not checked" in _section_text(rep, 6)


def test_fit_file_in_the_report_reads_back(tmp_path):
    a = cascade_analysis(tmp_path)
    body = _section_text(fit_report(a), 8).split("\n", 2)[2]   # drop the heading and rule
    rec = record_from_dict(tomllib.loads(body), "report")
    assert rec.values == a.record.values and rec.covariance == a.record.covariance
    f = tmp_path / "fit.toml"
    f.write_text(body)
    b = analyse_fit_file(f, samples=2000)
    assert b.prediction.mean == a.prediction.mean


def test_regime_section_with_temperatures(tmp_path):
    rng = np.random.default_rng(53)
    e_kb = constants.e / constants.k
    T = np.repeat([1.0, 2.0, 4.0], 7)
    V = np.tile(np.linspace(-0.01, 0.01, 7), 3)
    G = 1e8 * np.exp(0.03 * V * e_kb / T) * np.exp(rng.normal(0, 0.02, T.size))
    f = tmp_path / "rates.csv"
    f.write_text("temperature_k,gate_voltage,escape_rate,escape_rate_std\n" + "".join(
        f"{float(a)!r},{float(b)!r},{float(c)!r},{0.02 * float(c)!r}\n"
        for a, b, c in zip(T, V, G)))
    a = add_thermal_check(escape_analysis(tmp_path), f)
    regime = _section_text(fit_report(a), 6)
    assert "thermal activation" in regime and "lever arm" in regime
    assert any("escape regime" in n for n in a.notes)


def test_figures_follow_the_figure_format(tmp_path):
    for a in (cascade_analysis(tmp_path), escape_analysis(tmp_path)):
        figs = figure_data(a)
        assert [f["id"] for f in figs] == ["pump_fit", "pump_residuals", "pump_error"]
        for i, fig in enumerate(figs):
            check_figure(fig, f"figures[{i}]")
            assert all(len(s["x"]) <= 400 for s in fig["series"])
        assert figs[2]["yscale"] == "log"
