"""Record bytes parsed by msgspec first, json as the reference (budget.record.parse_json).

The reference is the standard library's ``json`` module with NaN and Infinity refused, as the
reader was before: for every input the fast path must give exactly the reference's data
(floats bit for bit, ints of any size, key order) or, where it declines, the reference's own
result or located message.
"""

from __future__ import annotations

import json
import struct
from unittest import mock

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from budget import record
from budget.errors import DataError
from budget.record import parse_json


def _same(a, b) -> bool:
    """Equal, with the same types, key order and float bits (-0.0 is not 0.0)."""
    if type(a) is not type(b):
        return False
    if isinstance(a, dict):
        return list(a) == list(b) and all(_same(a[k], b[k]) for k in a)
    if isinstance(a, list):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b))
    if isinstance(a, float):
        return struct.pack("<d", a) == struct.pack("<d", b)
    return a == b


def _outcome(raw: bytes, fast: bool):
    with mock.patch.object(record, "_FAST_PARSE", fast):
        try:
            return "data", parse_json(raw, "r.json")
        except DataError as exc:
            return "error", exc.one_line()


def _agree(raw: bytes) -> None:
    fast, ref = _outcome(raw, True), _outcome(raw, False)
    assert fast[0] == ref[0], raw[:80]
    assert _same(fast[1], ref[1]) if fast[0] == "data" else fast[1] == ref[1]


# inputs where JSON parsers are known to differ (common practice: the corners listed by the
# JSON test suites; RFC 8259 §6 numbers, §7 strings, §8.1 UTF-8) and the reader's own refusals
CORNERS = [
    b'{"a": 1}', b'[1, 2.5, -0.0, -0, 0.1, 1e-400, 5e-324, 2.2250738585072011e-308]',
    b'1.7976931348623157e308', b'1.7976931348623159e308', b'1e400', b'-1e400',
    b'NaN', b'[Infinity]', b'-Infinity', b'{"a": NaN}',
    b'123456789012345678901234567890', b'-9223372036854775809', b'18446744073709551616',
    b'1' * 4300, b'1' * 4301, b'-' + b'9' * 5000,
    b'"\\ud800"', b'"\\udc00\\ud800"', b'"\\ud83d\\ude00"', b'"\\u0000"', b'"a\x7f"',
    b'"\xff"', b'"\xed\xa0\x80"', b'"\xc0\xaf"', b'"\xf4\x90\x80\x80"', "\"µΩ\"".encode(),
    b'\xef\xbb\xbf{"bom": true}', b'\xef\xbb\xbf', b'', b' ', b'[1,]', b'{"a":1,}', b'01',
    b'1.', b'.5', b'+1', b'0x10', b'[1] x', b'"\x01"', b'\x0c1', b"'a'", b'{a: 1}',
    b'{"a": 1, "b": 2, "a": 3}', b'{"": {"": []}}', b'true', b'null', b'[true, false]',
    b'[' * 994 + b']' * 994, b'[' * 995 + b']' * 995, b'[' * 1000 + b']' * 1000,
    b'{"a":' * 996 + b'1' + b'}' * 996, b'[' * 100_000,
]


@pytest.mark.parametrize("raw", CORNERS, ids=range(len(CORNERS)))
def test_fast_parse_agrees_with_json_on_the_corners(raw):
    _agree(raw)


def test_fast_parse_is_used_for_a_record():
    # the fast path is taken (not every record sent to the reference)
    raw = json.dumps({"value": 0.1, "list": [1, 2]}, indent=2).encode()
    with mock.patch.object(record, "_DECODER") as dec:
        dec.decode.return_value = {"from": "msgspec"}
        assert parse_json(raw, "r.json") == {"from": "msgspec"}


def test_deeply_nested_bytes_go_to_the_reference():
    # more brackets than _FAST_MAX_BRACKETS: json decides, and names the problem
    raw = b'[' * 5000 + b']' * 5000
    with pytest.raises(DataError, match="nested too deeply"):
        parse_json(raw, "r.json")


@settings(max_examples=300, deadline=None, derandomize=True, database=None)
@given(st.floats(allow_nan=False, allow_infinity=False),
       st.sampled_from(["{!r}", "{:.17e}", "{:.25g}", "{:.3e}", "{:.1f}"]))
def test_floats_bit_for_bit(x, form):
    # every float64 written in several forms parses to the same float as json's
    # (float() of the text, correctly rounded: Python documentation, float)
    _agree(f"[{form.format(x)}]".encode())


@settings(max_examples=300, deadline=None, derandomize=True, database=None)
@given(st.text(st.sampled_from('0123456789.eE+-'), min_size=1, max_size=40))
def test_number_like_text(text):
    _agree(f"[{text}]".encode())


@settings(max_examples=200, deadline=None, derandomize=True, database=None)
@given(st.recursive(st.none() | st.booleans() | st.integers() | st.text() |
                    st.floats(allow_nan=False, allow_infinity=False),
                    lambda kids: st.lists(kids, max_size=4) |
                    st.dictionaries(st.text(max_size=5), kids, max_size=4), max_leaves=30),
       st.integers(0, 3))
def test_json_documents(data, indent):
    _agree(json.dumps(data, indent=indent or None, ensure_ascii=bool(indent % 2)).encode())


def test_season_records_parse_the_same(tmp_path):
    from logbook_helpers import season_records
    for p in season_records(tmp_path, first=4):
        _agree(p.read_bytes())
