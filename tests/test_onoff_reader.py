"""The on/off record reader's fast paths (issue 14, item 4) refuse exactly what the plain
reading refuses: bad bytes past the first MiB (only the head is decoded up front), a blank
pump state (read as a categorical column), and give the same numbers as Python's float() —
correctly rounded decimal conversion, the reference here (IEEE 754 round-to-nearest)."""

from __future__ import annotations

import numpy as np
import pytest

from budget.errors import DataError
from budget.inputs.onoff_table import read_onoff


def _write(path, rows: list[str]) -> None:
    path.write_text("# invented test record\ntime_s,reading,pump\n" + "\n".join(rows) + "\n")


def test_numbers_are_the_correctly_rounded_floats(tmp_path):
    rng = np.random.default_rng(5)
    vals = rng.normal(0.0961, 1e-6, 5000).tolist()
    rows = [f"{i}.5,{v!r},{'on' if i % 2 else 'off'}" for i, v in enumerate(vals)]
    _write(tmp_path / "r.csv", rows)
    t = read_onoff(tmp_path / "r.csv")
    assert t.reading.tolist() == [float(repr(v)) for v in vals]      # bit for bit
    assert t.on.tolist() == [bool(i % 2) for i in range(5000)]


def test_bad_byte_beyond_the_first_mebibyte_is_located(tmp_path):
    rows = [f"{i},0.0961,on" for i in range(1, 120_000)]            # about 1.5 MB
    p = tmp_path / "big.csv"
    _write(p, rows)
    raw = bytearray(p.read_bytes())
    at = len(raw) - 20
    raw[at] = 0xFF                                                   # never valid in UTF-8
    p.write_bytes(bytes(raw))
    with pytest.raises(DataError, match=r"not UTF-8 text \(bad byte at offset "
                       + str(at) + r", line \d+\)"):
        read_onoff(p)


@pytest.mark.parametrize("state, shown", [("", "''"), ("maybe", "'maybe'")])
def test_pump_state_refused_by_row(tmp_path, state, shown):
    _write(tmp_path / "r.csv", ["0,1.0,on", "1,1.0,off", f"2,1.0,{state}", "3,1.0,on"])
    with pytest.raises(DataError) as exc:
        read_onoff(tmp_path / "r.csv")
    assert exc.value.row == 3 and exc.value.field == "pump"
    assert f"got {shown}" in str(exc.value)
