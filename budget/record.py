"""Stored result records (``budget run --json``) read back into a Budget, or a DataError.

This is the one reader of records: ``explain``, ``compare``, ``report``, ``sign`` and the
evidence archive all go through it. The record's shape is checked before
:meth:`budget.result.Budget.from_dict` sees it, so a hand-edited or truncated file gives a
:class:`~budget.errors.DataError` naming the file, the line (text that is not JSON) or the field
at fault (``measurands[0].terms[2].sensitivity``) instead of a KeyError.

Checked, in this order:

* the bytes are UTF-8 text (a byte-order mark is dropped) and JSON, without NaN or Infinity;
* the top level is an object whose ``schema`` is :data:`budget.result.SCHEMA` or one of the
  older formats still read, :data:`budget.result.OLDER_SCHEMAS` (any other is refused: this
  version cannot know what its fields mean);
* the record against the JSON Schema shipped with the package,
  ``budget/schemas/record.schema.json`` (README "The result record"): every known field has its
  declared type and range (numbers finite float64 values, ν positive or null, probabilities in
  (0, 1), correlations in [-1, 1]); keys the schema does not name are allowed, so records of
  later versions with added fields still load;
* whatever else :meth:`Budget.from_dict` refuses (a distribution's parameters, say) is reported
  with the field ``record``.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import msgspec

from .errors import BudgetError, DataError
from .numbers import NumberError, checked, shown
from .result import OLDER_SCHEMAS, SCHEMA, Budget
from .schema import SchemaViolation, load_schema, path_text, validate

__all__ = ["load_record", "record_from_text", "record_from_dict", "record_data", "parse_json",
           "budget_from_data", "read_record_bytes", "finite_number"]

def finite_number(v: Any) -> bool:
    """A finite JSON number (bool is not one; an integer too large for a float is not finite)."""
    try:
        checked(v)
    except NumberError:
        return False
    return True


def _check_record(data: Any, file: str | None) -> None:
    """Refuse anything that is not a result record of this version: the shipped JSON Schema
    ``budget/schemas/record.schema.json`` declares the type of every known field."""
    if not isinstance(data, dict):
        raise DataError("must be a JSON object (a result record from 'budget run --json')",
                        file=file)
    schema = data.get("schema")
    if schema != SCHEMA and schema not in OLDER_SCHEMAS:
        older = " and the older " + ", ".join(map(repr, OLDER_SCHEMAS)) if OLDER_SCHEMAS else ""
        raise DataError(f"is {shown(schema)}, this version reads {SCHEMA!r}{older}", file=file,
                        field="schema")
    try:
        validate(data, load_schema("record.schema.json"))
    except SchemaViolation as exc:
        raise DataError(exc.message, file=file, field=path_text(exc.path) or None) from None


def _reject_constant(name: str):
    raise ValueError(f"{name} is not allowed in a record")


def record_data(text: str | bytes, *, file: str | None = "<record>") -> dict[str, Any]:
    """Parse record text (or its UTF-8 bytes) and check it; return the plain JSON data.

    For callers that need the record as data (the archive's manifest, a byte-for-byte
    recomputation); :func:`record_from_text` gives the Budget.

    Raises
    ------
    DataError
        Not UTF-8, not JSON (with its line), another schema, or a field missing or of the
        wrong kind.
    """
    data = parse_json(text, file)
    _check_record(data, file)
    return data


#: parse record bytes with msgspec first (about 2.5 times faster than json on a record);
#: False: json alone (the reference, for benchmarks)
_FAST_PARSE = True
_DECODER = msgspec.json.Decoder()
#: at most this many ``[`` and ``{`` in the bytes for the fast parser: then the nesting is
#: shallower than json's limit, so msgspec cannot accept what json refuses as too deep
_FAST_MAX_BRACKETS = 900


def parse_json(text: str | bytes, file: str | None) -> Any:
    """The JSON data of record text or its UTF-8 bytes (a byte-order mark dropped).

    Bytes are parsed by msgspec, which gives the same data as the standard library's json
    (every float correctly rounded, integers of any size up to json's 4300 digits, the last
    of repeated keys) and refuses all that json refuses; whatever msgspec refuses (NaN,
    numbers out of range, lone surrogates, bad UTF-8, bad JSON, a byte-order mark) is parsed
    again by json, which gives the data or the located message exactly as before.

    Raises
    ------
    DataError
        Not UTF-8, not JSON (with its line and column), NaN or Infinity, nested too deeply.
    """
    if _FAST_PARSE and isinstance(text, (bytes, bytearray)) and \
            text.count(b"[") + text.count(b"{") <= _FAST_MAX_BRACKETS:
        try:
            return _DECODER.decode(text)
        except (msgspec.MsgspecError, RecursionError):
            pass                          # the reference below says what is wrong
    if isinstance(text, (bytes, bytearray)):
        try:
            text = bytes(text).decode("utf-8-sig")
        except UnicodeDecodeError:
            raise DataError("not UTF-8 text", file=file) from None
    try:
        return json.loads(text, parse_constant=_reject_constant)
    except json.JSONDecodeError as exc:
        raise DataError(f"not valid JSON: {exc.msg} (column {exc.colno})", file=file,
                        line=exc.lineno) from None
    except ValueError as exc:  # NaN/Infinity, or an integer with too many digits
        raise DataError(str(exc), file=file) from None
    except RecursionError:
        raise DataError("not valid JSON: nested too deeply", file=file) from None


def budget_from_data(data: dict[str, Any], file: str | None) -> Budget:
    """The Budget of record data that :func:`record_data` has checked; anything
    ``Budget.from_dict`` still refuses becomes a DataError naming ``file``."""
    try:
        return Budget.from_dict(data)
    except BudgetError as exc:
        raise DataError(exc.message, file=file, field=exc.field) from None
    except (KeyError, TypeError, ValueError, IndexError, AttributeError) as exc:
        # a field the checks do not cover (e.g. a distribution's parameters)
        raise DataError(f"cannot be read: {type(exc).__name__}: {exc}", file=file,
                        field="record") from None


def record_from_dict(data: Any, *, file: str | None = None) -> Budget:
    """Check parsed record data and turn it into a Budget; DataError names the field."""
    _check_record(data, file)
    return budget_from_data(data, file)


def record_from_text(text: str | bytes, *, file: str | None = "<record>") -> Budget:
    """Parse record text (or its UTF-8 bytes) into a Budget (see :func:`record_data`)."""
    return budget_from_data(record_data(text, file=file), file)


def load_record(path: str | Path) -> Budget:
    """Read a result record file (UTF-8 JSON) into a Budget (see :func:`record_data`).

    Raises
    ------
    DataError
        File missing or unreadable, or any problem :func:`record_data` finds.
    """
    return record_from_text(read_record_bytes(path), file=str(path))


def read_record_bytes(path: str | Path) -> bytes:
    """The bytes of a record file; DataError (naming the file) if it is a folder, missing or
    unreadable."""
    p, name = Path(path), str(path)
    if p.is_dir():
        raise DataError("is a folder, not a record file", file=name)
    if not p.is_file():
        raise DataError("record file not found", file=name)
    try:
        return p.read_bytes()
    except OSError as exc:
        raise DataError(f"cannot be read: {exc.strerror}", file=name) from None
