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


_CASES = {
    "plain": ["0,0.1,off", "1,0.2,on", "2,0.30000000000000004,on"],
    "space after a comma": ["0, 0.1,off", "1,0.2, on"],
    "tab before a field": ["0,\t0.1,off", "1,0.2,on"],
    "indented comment": ["0,0.1,off", "  # a note", "1,0.2,on"],
    "comment without spaces": ["0,0.1,off", "#note", "1,0.2,on"],
    "empty reading": ["0,,off", "1,0.2,on"],
    "short row": ["0,0.1,off", "1,0.2"],
    "long row": ["0,0.1,off", "1,0.2,on,9"],
    "nan and inf": ["0,NaN,off", "1,inf,on"],
    "word": ["0,0.1,off", "1,high,on"],
    "integers": ["0,1,off", "1,2,on", "2,3,on"],
    "integer beyond 2**53": ["0,9007199254740993,off", "1,9007199254740995,on"],
    "huge integer": ["0,1" + "0" * 30 + ",off", "1,2,on"],
    "hex": ["0,0x1A,off", "1,2,on"],
    "bad pump": ["0,0.1,of", "1,0.2,on"],
    "time not increasing": ["0,0.1,off", "0,0.2,on"],
    "exponents": ["1e0,1.5e-7,off", "2E0,-3.25E+2,on"],
}


@pytest.mark.parametrize("case", sorted(_CASES))
def test_fast_path_reads_and_refuses_as_the_general_reading(tmp_path, case, monkeypatch):
    # the general reading (pandas infers each column, skipinitialspace) is the reference
    # (project convention: a fast path is an implementation detail); its numbers are checked
    # against Python's float() above
    import budget.inputs.onoff_table as m
    path = tmp_path / "r.csv"
    _write(path, _CASES[case])

    def outcome():
        try:
            t = read_onoff(path)
        except DataError as exc:
            return exc.one_line()
        return t.time.tobytes(), t.reading.tobytes(), t.on.tobytes()
    fast = outcome()
    monkeypatch.setattr(m, "_FAST", False)
    assert fast == outcome()


def test_fast_path_is_taken_only_when_no_field_can_begin_with_a_space():
    from budget.inputs.onoff_parse import no_initial_space
    assert no_initial_space(b"# a comment with spaces\ntime_s, reading, pump\n0,1,on\n")
    assert no_initial_space(b"\xef\xbb\xbftime_s,reading,pump\n0,1,on\n")
    assert not no_initial_space(b"time_s,reading,pump\n0, 1,on\n")
    assert not no_initial_space(b"time_s,reading,pump\n0,1,on\n# note with spaces\n")
    assert not no_initial_space(b"  # indented\ntime_s,reading,pump\n0,1,on\n")
    assert not no_initial_space(b"# only comments\n")
