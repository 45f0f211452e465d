"""The on/off record read in pieces by threads (issue 14, item 4) gives the same bytes as the
general reading, and refuses with the same one-line messages (file, row, field).

Reference: the general reading in ``budget.inputs.onoff_table`` (pandas infers each column,
``skipinitialspace``, then the located checks); its numbers are checked against Python's
``float()`` (correctly rounded, IEEE 754 round-to-nearest) in tests/test_onoff_reader.py. The
pieces are forced small (``_MIN_PART = 1``) so that every cut point of these short files is
exercised with 2, 3 and 7 pieces (1: the one-pass fast path)."""

from __future__ import annotations

import numpy as np
import pytest

import budget.inputs.onoff_parse as P
import budget.inputs.onoff_table as m
from budget.errors import DataError

_HEAD = b"# invented test record\ntime_s,reading,pump\n"


def _rows(n: int, start: int = 0) -> list[bytes]:
    # invented values with ten significant digits, as an on/off record's voltmeter gives
    return [f"{i}.5,{0.0002 + 1.2345678e-7 * i:.10g},{'on' if (i // 3) % 2 else 'off'}".encode()
            for i in range(start, start + n)]


def _body(special: list[bytes], at: float) -> bytes:
    """24 plain rows with the special lines inserted at fraction ``at`` of the body."""
    rows = _rows(24)
    k = int(round(at * len(rows)))
    return b"\n".join(rows[:k] + special + [r.replace(b".5,", b".75,", 1) for r in rows[k:]])


_SPECIAL = {                       # lines inserted into a plain record (times keep increasing)
    "nothing": [],
    "comment": [b"#note"],
    "comment with spaces": [b"#a note, with spaces"],
    "trailing comment": [b"30.6,0.0003,on#note"],
    "blank lines": [b"", b"", b"\r"],
    "exponents": [b"30.6,1.5e-7,on", b"30.7,-3.25E+2,off", b"30.8,2.5e+00,on"],
    "signs and points": [b"30.6,-0,on", b"30.7,+.5,off", b"30.8,5.,on", b"30.9,-0.0,off"],
    "25 digits": [b"30.6,0.1000000000000000055511151,on", b"30.7,9.999999999999999999999e-5,on"],
    "subnormal": [b"30.6,4.9e-324,on", b"30.7,2.2250738585072011e-308,off"],
    "integers": [b"30,1,on", b"31,2,off"],
    "pump as 1/0": [b"30.6,0.1,1", b"30.7,0.1,0", b"30.8,0.1,1.0"],
    "pump in capitals": [b"30.6,0.1,ON", b"30.7,0.1,Off"],
    "quoted": [b'30.6,"0.1",on', b'30.7,0.2,"off"'],
    "quoted newline": [b'30.6,0.1,"o', b'n"'],
    "byte-order mark on a row": [b"\xef\xbb\xbf30.6,0.1,on"],
    # refused (or read) by the general reading with its own message
    "space": [b"30.6, 0.1,on"],
    "tab": [b"30.6,0.1,\ton"],
    "empty reading": [b"30.6,,on"],
    "short row": [b"30.6,0.1"],
    "long row": [b"30.6,0.1,on,9"],
    "nan": [b"30.6,NaN,on"],
    "inf": [b"30.6,-inf,on"],
    "overflow": [b"30.6,1e400,on"],
    "word": [b"30.6,high,on"],
    # a piece of only True/False fields was read as 1.0/0.0 (pandas' bool words, any case) where
    # the general reading refuses the word (review of the fast reader)
    "boolean words": [b"30.6,True,on", b"30.7,FALSE,off", b"30.8,true,on"],
    "hex": [b"30.6,0x1A,on"],
    "integer beyond 2**53": [b"30,9007199254740993,on"],
    "bad pump": [b"30.6,0.1,of"],
    "empty pump": [b"30.6,0.1,"],
    "time not increasing": [b"0.5,0.1,on"],
    "bad byte": [b"30.6,0.1\xff,on"],
}


def _outcome(path):
    try:
        t = m.read_onoff(path)
    except DataError as exc:
        return exc.one_line()
    return t.time.tobytes(), t.reading.tobytes(), t.on.tobytes(), t.on.dtype.str


def _general(path, monkeypatch):
    with monkeypatch.context() as mp:
        mp.setattr(m, "_FAST", False)
        return _outcome(path)


def _small_pieces(monkeypatch, threads):
    monkeypatch.setattr(P, "_MIN_PART", 1)
    monkeypatch.setattr(P, "threads", lambda: threads)


@pytest.mark.parametrize("eol", [b"\n", b"\r\n"])
@pytest.mark.parametrize("at", [0.0, 0.5, 1.0])
@pytest.mark.parametrize("case", sorted(_SPECIAL))
def test_pieces_read_and_refuse_as_the_general_reading(tmp_path, monkeypatch, case, at, eol):
    path = tmp_path / "r.csv"
    path.write_bytes((_HEAD + _body(_SPECIAL[case], at) + b"\n").replace(b"\n", eol))
    reference = _general(path, monkeypatch)
    for threads in (1, 2, 3, 7):
        _small_pieces(monkeypatch, threads)
        assert _outcome(path) == reference, threads


def _cuts(path, parts):
    with open(path, "rb") as f:
        raw = path.read_bytes()
        return P._cuts(f.fileno(), P.body_start(raw), len(raw), parts)


def test_plain_records_are_really_read_in_pieces(tmp_path, monkeypatch):
    # guards against a fast path that always falls back: the pieces are used, same bytes
    path = tmp_path / "r.csv"
    path.write_bytes(_HEAD + b"\n".join(_rows(3000)) + b"\n")
    raw = path.read_bytes()
    ref = _general(path, monkeypatch)
    _small_pieces(monkeypatch, 4)
    cuts = _cuts(path, 4)
    assert len(cuts) == 5 and all(raw[c - 1:c] == b"\n" for c in cuts[1:-1])
    got = P.read_pieces(path, lambda text: list(m.COLUMNS))
    assert got is not None
    assert (got[0].tobytes(), got[1].tobytes(), got[2].tobytes()) == ref[:3]


def test_bad_row_in_a_later_piece_is_named_by_its_row_in_the_file(tmp_path, monkeypatch):
    rows = _rows(3000)
    rows[2500] = b"2500.5,0.0003,maybe"                    # data row 2501 (header excluded)
    path = tmp_path / "r.csv"
    path.write_bytes(_HEAD + b"\n".join(rows) + b"\n")
    _small_pieces(monkeypatch, 4)
    with pytest.raises(DataError) as exc:
        m.read_onoff(path)
    assert (exc.value.row, exc.value.field) == (2501, "pump")
    assert "got 'maybe'" in str(exc.value)


def test_time_not_increasing_across_a_cut_is_named_by_its_row(tmp_path, monkeypatch):
    rows = _rows(3000)
    path = tmp_path / "r.csv"
    path.write_bytes(_HEAD + b"\n".join(rows) + b"\n")
    _small_pieces(monkeypatch, 2)
    cut = _cuts(path, 2)[1]
    row = path.read_bytes()[len(_HEAD):cut].count(b"\n") + 1   # first data row of piece 2
    rows[row - 1] = rows[row - 2]                               # repeats the time before it
    path.write_bytes(_HEAD + b"\n".join(rows) + b"\n")
    assert _cuts(path, 2)[1] == cut
    with pytest.raises(DataError) as exc:
        m.read_onoff(path)
    assert (exc.value.row, exc.value.field) == (row, "time_s")


def test_no_piece_starts_with_a_byte_order_mark(tmp_path, monkeypatch):
    # pandas drops U+FEFF at the start of a piece; the one-pass reading keeps (and refuses) it
    path = tmp_path / "r.csv"
    path.write_bytes(_HEAD + b"\n".join(_rows(200)) + b"\n")
    _small_pieces(monkeypatch, 2)
    cut = _cuts(path, 2)[1]
    raw = path.read_bytes()
    path.write_bytes(raw[:cut] + b"\xef\xbb\xbf" + raw[cut:])
    assert _cuts(path, 2) is None
    assert _outcome(path) == _general(path, monkeypatch)


def test_a_quote_or_space_after_the_header_declines_the_pieces(tmp_path, monkeypatch):
    # a quoted field may hold a newline, so a cut could fall inside it
    _small_pieces(monkeypatch, 2)
    for extra in (b'9000,"0.1",on', b"9000,0.1,on # note", b"9000,\t0.1,on"):
        path = tmp_path / "r.csv"
        path.write_bytes(_HEAD + b"\n".join(_rows(200) + [extra]) + b"\n")
        assert P.read_pieces(path, lambda text: list(m.COLUMNS)) is None


def test_small_files_are_not_cut(tmp_path):
    path = tmp_path / "r.csv"
    path.write_bytes(_HEAD + b"\n".join(_rows(3000)) + b"\n")     # 90 kB < two pieces
    assert P.read_pieces(path, lambda text: list(m.COLUMNS)) is None
    assert np.array_equal(m.read_onoff(path).reading,
                          [float(r.split(b",")[1]) for r in _rows(3000)])


def test_pieces_longer_than_the_parsers_chunk_read_as_the_general_reading(tmp_path, monkeypatch):
    # pandas' low_memory reading works in chunks of 2**18 lines for 3 columns (its heuristic
    # 2**20 // columns, rounded down to a power of two: pandas/_libs/parsers.pyx, memory):
    # 600 000 rows give each of two pieces two or more chunks; then a bad pump state in the
    # last chunk of the second piece
    rng = np.random.default_rng(3)
    vals = (0.0961 + 1e-6 * rng.standard_normal(600_000)).tolist()
    rows = [f"{i},{v:.10g},{'on' if (i // 100) % 2 else 'off'}" for i, v in enumerate(vals)]
    path = tmp_path / "r.csv"
    path.write_text("time_s,reading,pump\n" + "\n".join(rows) + "\n")
    ref = _general(path, monkeypatch)
    _small_pieces(monkeypatch, 2)
    assert P.read_pieces(path, lambda text: list(m.COLUMNS)) is not None
    assert _outcome(path) == ref
    rows[599_990] = "599990,0.0961,maybe"                   # data row 599 991
    path.write_text("time_s,reading,pump\n" + "\n".join(rows) + "\n")
    ref = _general(path, monkeypatch)
    assert "row 599991" in ref and "pump" in ref and "'maybe'" in ref
    assert _outcome(path) == ref


@pytest.mark.parametrize("column", ["time_s", "reading"])
def test_a_column_of_true_false_words_is_refused_as_by_the_general_reading(
        tmp_path, monkeypatch, column):
    # the whole column True/False: pandas gave 1.0/0.0 and the budget ran (exit 0); the
    # general reading refuses the first such field, row 1
    rows = [(f"{i}.5", "True" if i % 2 else "False", "on" if (i // 3) % 2 else "off")
            for i in range(12)]
    if column == "time_s":
        rows = [("False" if i == 0 else "True", f"0.{i + 1}", p) for i, (_, _, p) in
                enumerate(rows[:2])]
    path = tmp_path / "r.csv"
    path.write_bytes(_HEAD + b"\n".join(",".join(r).encode() for r in rows) + b"\n")
    reference = _general(path, monkeypatch)
    assert isinstance(reference, str) and f"field '{column}'" in reference
    assert _outcome(path) == reference                          # the one-pass fast path
    for threads in (2, 3):
        _small_pieces(monkeypatch, threads)
        assert _outcome(path) == reference, threads
