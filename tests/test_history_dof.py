"""Calibration histories: the degrees of freedom a certificate's coverage factor implies
(issue 11 item 2, the history part).

References, named beside each check:
* JCGM 100:2008 Table G.2: t_95.45(4) = 2.87, t_95.45(∞) = 2.000; for p = 95 %:
  t_95(∞) = 1.960 (REFERENCES.md).
* JCGM 100:2008 G.2b (Welch–Satterthwaite): ν = u⁴ / Σ u_i⁴/ν_i for a linear combination.
* JCGM 100:2008 G.4–G.6: k = t_p(ν) read the other way gives ν from a stated k.
* Student-t quantile tables: t_0.975(60) = 2.000 (common practice; any t table, memory).
"""

from __future__ import annotations

import math
from pathlib import Path

import pandas as pd
import pytest
from numeric import near

from budget.errors import DataError, SpecError
from budget.inputs import InputContext, run_module

R0 = 1.0e9                       # Ω, invented nominal
START = pd.Timestamp("2024-01-10")


def _write(folder: Path, n, big_u, ks):
    lines = ["date,value,expanded_uncertainty,coverage_factor"]
    for i in range(n):
        d = (START + pd.Timedelta(days=30 * i)).date().isoformat()
        lines.append(f"{d},{R0 + 5.0 * (-1) ** i!r},{big_u!r},{ks[i]!r}")
    (folder / "hist.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")


def _cal(folder, **table):
    ctx = InputContext(name="R", table={"module": "resistor", "file": "hist.csv",
                                        "at": "2024-12-01", "inflate": "never", **table},
                       folder=Path(folder), spec_file="spec.toml")
    (q,) = run_module(ctx).quantities     # no corrections configured: the one row is R
    return q


def test_table_g2_k_287_gives_nu_4_per_row_and_4n_for_the_mean(tmp_path):
    # Ten calibrations, each U = 287 Ω with k = 2.87 for 95.45 %: Table G.2 gives ν_i = 4
    # (2.87 is rounded, so ν_i = 4 to about 1 %). A constant model weights them equally,
    # a_i = 1/10, and G.2b gives ν = (10·u²/100)² / (10·(u²/100)²/ν_i) = 10·ν_i = 40.
    _write(tmp_path, 10, 287.0, [2.87] * 10)
    q = _cal(tmp_path, drift="constant", coverage_probability=0.9545)
    assert q.dof == near(40.0, rel=1e-9)            # ν_i = 4 exactly (k states t_95.45(4))
    assert q.distribution.kind == "student-t"          # JCGM 101 §6.4.9.7
    assert "Welch–Satterthwaite" in q.provenance.dof_reason
    assert "k = 2.87" in q.provenance.dof_reason and "95.45 %" in q.provenance.dof_reason
    assert q.standard_uncertainty == near(100 / math.sqrt(10), rel=1e-12)   # u unchanged


def test_unequal_nu_follow_the_weights(tmp_path):
    # Five rows k = 2.87 (ν ≈ 4) and five k = 2.00 at 95.45 % (ν = ∞, Table G.2 last row):
    # only the first five enter the G.2b denominator: ν = (10 w)² / (5 w²/4) = 80.
    _write(tmp_path, 10, 287.0, [2.87] * 5 + [2.0] * 5)
    # equal U but unequal k gives unequal u: u_i = 100 Ω (k = 2.87) and 143.5 Ω (k = 2);
    # weights a_i ∝ 1/u_i²; compute G.2b by hand with w_i = a_i² u_i².
    u = [287.0 / 2.87] * 5 + [287.0 / 2.0] * 5
    wt = [1 / x ** 2 for x in u]
    a = [x / sum(wt) for x in wt]
    w = [ai ** 2 * ui ** 2 for ai, ui in zip(a, u)]
    nu4 = 4.0          # JCGM 100 Table G.2: t_95.45(4) = 2.87 to the digits stated
    expected = sum(w) ** 2 / sum(wi ** 2 / nu4 for wi in w[:5])
    q = _cal(tmp_path, drift="constant", coverage_probability=0.9545)
    assert q.dof == near(expected, rel=1e-9)


def test_k2_at_9545_keeps_infinite_nu(tmp_path):
    # k = 2.00 for 95.45 % is the normal quantile (Table G.2, ν = ∞): the row stays normal.
    _write(tmp_path, 6, 200.0, [2.0] * 6)
    q = _cal(tmp_path, coverage_probability=0.9545)
    assert math.isinf(q.dof) and q.distribution.kind == "normal"


def test_k2_at_95_default_gives_nu_60_per_row(tmp_path):
    # Default p = 0.95: k = 2.00 is t_0.975(ν) at ν ≈ 60 (t tables, memory: t_0.975(60) =
    # 2.000); six equal rows, constant model: ν = 6·ν_i (G.2b, as above).
    _write(tmp_path, 6, 200.0, [2.0] * 6)
    q = _cal(tmp_path, drift="constant")
    # t_0.975(60) = 2.0003 states 2.00 to its digits, so ν_i = 60 (the integer, not 60.4)
    assert q.dof == near(6 * 60.0, rel=1e-9)
    assert "p = 95 % assumed" in q.provenance.dof_reason


def test_k_below_the_normal_quantile_refused_by_row(tmp_path):
    # k = 1.70 cannot be t_0.975(ν) for any ν (t_p(ν) > z_0.975 = 1.960, Table G.2 last row)
    _write(tmp_path, 4, 200.0, [2.0, 2.0, 1.70, 2.0])
    with pytest.raises(DataError) as exc:
        _cal(tmp_path)
    assert exc.value.row == 3 and exc.value.field == "coverage_factor"


def test_coverage_probability_must_be_a_probability(tmp_path):
    _write(tmp_path, 4, 200.0, [2.0] * 4)
    with pytest.raises(SpecError) as exc:
        _cal(tmp_path, coverage_probability=95)
    assert exc.value.field.endswith("coverage_probability")


def test_per_row_coverage_probability_column(tmp_path):
    # k = 1 states u itself: p = 68.27 % of a normal (JCGM 100 Table G.1) gives ν = ∞; a row
    # with k = 2.87 at 95.45 % beside it keeps ν ≈ 4 (Table G.2), so the prediction's ν is
    # finite. Without the column the k = 1 row is refused at the default p = 95 %.
    rows = ["date,value,expanded_uncertainty,coverage_factor,coverage_probability",
            "2024-01-10,1000000005.0,100.0,1,0.6827",
            "2024-02-09,999999995.0,287.0,2.87,0.9545",
            "2024-03-10,1000000005.0,100.0,1,"]
    (tmp_path / "hist.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    with pytest.raises(DataError) as exc:
        _cal(tmp_path, drift="constant")
    assert exc.value.row == 3 and exc.value.field == "coverage_factor"
    q = _cal(tmp_path, drift="constant", coverage_probability=0.6827)
    # equal u = 100 Ω: a_i = 1/3, w_i = 100²/9; only row 2 has finite ν ≈ 4:
    # ν = (3w)²/(w²/4) = 36 (G.2b)
    assert q.dof == near(36.0, rel=0.02)
    assert "k = 2.87 at 95.45 %" in q.provenance.dof_reason
