"""Where the on/off record reader says a problem is (issue 14 review, D3 and D4): the row of a
too-long data row counted as pandas' C tokenizer reads the file, and lines a reader takes for a
comment or a blank line but pandas would read as data refused with their line. The reference
for each expected row or line is a count by hand of the file text written beside it (data rows
1-based, header excluded, comment and blank lines not counted: the convention of
budget.inputs.tables); pandas' reading rules (comment='#' only in column 1 or after a field,
quoted fields may hold line breaks, lines end at \\n, \\r\\n or \\r only) are those of the
pandas read_csv documentation (memory)."""

from __future__ import annotations

import pytest

from budget.errors import DataError
from budget.inputs.onoff_table import read_onoff

_HEAD = "# invented test record\ntime_s,reading,pump\n"

# (body after the header, expected message); the row is counted by hand as stated
_ROWS = {
    # rows: 0.5→1, 1.5→2, 2.5 (its comment's comma is no field)→3, 3.5→4, 4.5→5, 5.5→6
    "comment with a comma": ("0.5,0.000,off\n1.5,0.001,on\n2.5,0.002,off # note, restarted\n"
                             "3.5,0.003,on\n4.5,0.004,off\n5.5,0.005,on,9\n6.5,0.006,off\n",
                             "row 6: has 4 fields; the header has 3"),
    # rows: 0.5→1, 1.5→2, 2.5 with "o<newline>ff" (one record over two lines)→3, 3.5→4,
    # 4.5→5, 5.5→6
    "quoted line break": ('0.5,0.000,off\n1.5,0.001,on\n2.5,0.002,"o\nff"\n3.5,0.003,on\n'
                          "4.5,0.004,off\n5.5,0.005,on,9\n6.5,0.006,off\n",
                          "row 6: has 4 fields; the header has 3"),
    # rows: 0.5→1, 1.5→2, the comment holding U+2028 and a comma is not counted, 2.5→3,
    # 3.5→4, 4.5→5, 5.5→6
    "U+2028 in a comment": ("0.5,0.000,off\n1.5,0.001,on\n# note\u2028x,y\n2.5,0.002,off\n"
                            "3.5,0.003,on\n4.5,0.004,off\n5.5,0.005,on,9\n6.5,0.006,off\n",
                            "row 6: has 4 fields; the header has 3"),
    # rows: 0.5→1, 1.5→2, 2.5 (a vertical tab inside, still one line)→3, 3.5→4, 4.5→5, 5.5→6
    "vertical tab in a row": ("0.5,0.000,off\n1.5,0.001,on\n2.5,0.002\v,off\n3.5,0.003,on\n"
                              "4.5,0.004,off\n5.5,0.005,on,9\n",
                              "row 6: has 4 fields; the header has 3"),
    # rows: 0.5→1, a short row (pandas fills it, not refused)→2, 2.5→3, 3.5→4 is the long one
    "short row before the long one": ("0.5,0.000,off\n1.5\n2.5,0.002,off\n3.5,0.003,on,9\n",
                                      "row 4: has 4 fields; the header has 3"),
    # rows: 0.5→1, 1.5 with a quoted '#, ' (not a comment, one field)→2, 2.5→3
    "quoted hash and comma": ('0.5,0.000,off\n1.5,0.001,"on #, x"\n2.5,0.002,off,1\n',
                              "row 3: has 4 fields; the header has 3"),
    # lines end at \r\n: rows 0.5→1, 1.5→2, 2.5→3
    "CRLF line ends": ("0.5,0.000,off\r\n1.5,0.001,on\r\n2.5,0.002,off,1\r\n",
                       "row 3: has 4 fields; the header has 3"),
    # the file's lines: 1 comment, 2 header, 3 data, 4 data, 5 the indented comment
    "indented comment": ("0.5,0.000,off\n1.5,0.001,on\n  # indented note\n2.5,0.002,off\n",
                         ":5: a comment must start in column 1 (this line has blanks before '#')"),
    # the file's lines: 1 comment, 2 header, 3 data, 4 the form feed line
    "form feed line": ("0.5,0.000,off\n\f\n1.5,0.001,on\n",
                       ":4: a line of blanks holds a form feed or vertical tab; make it empty"),
}


def _outcome(path):
    try:
        t = read_onoff(path)
    except DataError as exc:
        return exc.one_line()
    return t.time.tobytes(), t.reading.tobytes(), t.on.tobytes()


@pytest.mark.parametrize("case", sorted(_ROWS))
def test_problem_is_located_as_counted_by_hand_in_both_readings(tmp_path, case, monkeypatch):
    import budget.inputs.onoff_table as m
    body, want = _ROWS[case]
    path = tmp_path / "r.csv"
    path.write_bytes((_HEAD + body).encode())
    fast = _outcome(path)
    monkeypatch.setattr(m, "_FAST", False)
    general = _outcome(path)
    assert fast == general
    sep = "" if want.startswith(":") else ": "         # a line is shown as file:N
    assert general == f"{path}{sep}{want}"


@pytest.mark.parametrize("before", ["\f\n", "\v \n", "  # indented note\n", "\t# tab note\n"])
def test_line_before_the_header_that_pandas_would_take_for_it_is_refused(tmp_path, before,
                                                                         monkeypatch):
    # the file's lines: 1 comment, 2 the odd line, 3 header — counted by hand
    import budget.inputs.onoff_table as m
    path = tmp_path / "r.csv"
    path.write_text("# invented test record\n" + before
                    + "time_s,reading,pump\n0.5,0.1,off\n1.5,0.2,on\n")
    fast = _outcome(path)
    monkeypatch.setattr(m, "_FAST", False)
    assert fast == _outcome(path)
    assert fast.startswith(f"{path}:2: ")


@pytest.mark.parametrize("odd", ["  # indented note", "\f", "\v", "1.5,0.2,on,9"])
def test_large_record_read_in_pieces_agrees_with_the_general_reading(tmp_path, odd,
                                                                     monkeypatch):
    # pieces forced on a small file (as tests/test_onoff_pieces.py does); the odd line sits
    # after data row 3000 → file line 2 + 3000 + 1 = 3003, and as a long data row it is row
    # 3001 — counted from the lines written here
    import budget.inputs.onoff_parse as p
    import budget.inputs.onoff_table as m
    monkeypatch.setattr(p, "threads", lambda: 4)
    monkeypatch.setattr(p, "_MIN_PART", 1000)
    rows = [f"{i}.5,0.{i:04d},{'on' if i % 2 else 'off'}" for i in range(6000)]
    path = tmp_path / "r.csv"
    path.write_text(_HEAD + "\n".join(rows[:3000] + [odd] + rows[3000:]) + "\n")
    fast = _outcome(path)
    monkeypatch.setattr(m, "_FAST", False)
    general = _outcome(path)
    assert fast == general
    assert general.startswith(f"{path}: row 3001: has 4 fields" if "," in odd
                              else f"{path}:3003: ")
