"""Stored result records (``budget run --json``) read back into a Budget, or a DataError.

This is the one reader of records: ``explain``, ``compare``, ``report``, ``sign`` and the
evidence archive all go through it. The record's shape is checked before
:meth:`budget.result.Budget.from_dict` sees it, so a hand-edited or truncated file gives a
:class:`~budget.errors.DataError` naming the file, the line (text that is not JSON) or the field
at fault (``measurands[0].terms[2].sensitivity``) instead of a KeyError.

Checked, in this order:

* the bytes are UTF-8 text (a byte-order mark is dropped) and JSON, without NaN or Infinity;
* the top level is an object whose ``schema`` is :data:`budget.result.SCHEMA`;
* ``measurands`` is a non-empty list; each has a text ``name``, finite ``value``,
  ``standard_uncertainty`` (>= 0), ``coverage_factor``, ``coverage_probability`` and
  ``expanded_uncertainty``, and a list ``terms``; each term a text ``name``, finite ``value``,
  ``standard_uncertainty``, ``sensitivity``, ``contribution`` and ``variance_share``, and a
  ``dof`` that is positive or null (null stands for infinity);
* ``monte_carlo``, ``inputs`` and ``warnings``, when present, are lists of objects with the fields that
  :meth:`Budget.from_dict` needs;
* ``run`` is an object, and its ``input_correlations`` a list of ``[name, name, r]`` with
  -1 <= r <= 1;
* whatever else :meth:`Budget.from_dict` refuses (a distribution's parameters, say) is reported
  with the field ``record``.
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

from .errors import BudgetError, DataError
from .result import SCHEMA, Budget
from .warnings import SEVERITIES

__all__ = ["load_record", "record_from_text", "record_from_dict", "record_data",
           "finite_number"]

_NUM = "number"
_MEASURAND = {"name": str, "value": _NUM, "standard_uncertainty": _NUM,
              "coverage_factor": _NUM, "coverage_probability": _NUM,
              "expanded_uncertainty": _NUM, "terms": list}
_TERM = {"name": str, "value": _NUM, "standard_uncertainty": _NUM, "sensitivity": _NUM,
         "contribution": _NUM, "variance_share": _NUM}
_MC = {"measurand": str, "trials": int, "value": _NUM, "standard_uncertainty": _NUM,
       "interval_low": _NUM, "interval_high": _NUM, "interval_kind": str, "validated": bool,
       "tolerance": _NUM, "d_low": _NUM, "d_high": _NUM}
_INPUT = {"name": str, "value": _NUM, "standard_uncertainty": _NUM, "distribution": dict}
_WARNING = {"code": str, "input": str, "severity": str, "message": str}
_KIND_WORDS = {str: "text", list: "a list", dict: "an object", bool: "true or false"}


def finite_number(v: Any) -> bool:
    """A finite JSON number (bool is not one; an integer too large for a float is not finite)."""
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        return False
    try:
        return math.isfinite(v)
    except OverflowError:
        return False


def _check(obj: Any, shape: dict[str, Any], where: str, file: str | None) -> None:
    if not isinstance(obj, dict):
        raise DataError("must be a JSON object", file=file, field=where)
    for key, kind in shape.items():
        f = f"{where}.{key}" if where else key
        if key not in obj:
            raise DataError("is missing", file=file, field=f)
        v = obj[key]
        if kind == _NUM:
            ok, what = finite_number(v), "a finite number"
        elif kind is int:
            ok, what = isinstance(v, int) and not isinstance(v, bool), "an integer"
        else:
            ok, what = isinstance(v, kind), _KIND_WORDS[kind]
        if not ok:
            raise DataError(f"must be {what}; got {v!r}"[:200], file=file, field=f)


def _check_record(data: Any, file: str | None) -> None:
    """Refuse anything that is not a result record of this version (see module docstring)."""
    if not isinstance(data, dict):
        raise DataError("must be a JSON object (a result record from 'budget run --json')",
                        file=file)
    schema = data.get("schema")
    if schema != SCHEMA:
        raise DataError(f"is {schema!r}, this version reads {SCHEMA!r}"[:200], file=file,
                        field="schema")
    ms = data.get("measurands")
    if not isinstance(ms, list) or not ms:
        raise DataError("must be a non-empty list", file=file, field="measurands")
    for i, m in enumerate(ms):
        _check(m, _MEASURAND, f"measurands[{i}]", file)
        if m["standard_uncertainty"] < 0:
            raise DataError("must be >= 0", file=file,
                            field=f"measurands[{i}].standard_uncertainty")
        for j, t in enumerate(m["terms"]):
            where = f"measurands[{i}].terms[{j}]"
            _check(t, _TERM, where, file)
            dof = t.get("dof")
            if dof is not None and not (finite_number(dof) and dof > 0):
                raise DataError(f"must be a positive number or null; got {dof!r}"[:200],
                                file=file, field=f"{where}.dof")
    for key, shape in (("monte_carlo", _MC), ("inputs", _INPUT), ("warnings", _WARNING)):
        items = data.get(key, [])
        if not isinstance(items, list):
            raise DataError("must be a list", file=file, field=key)
        for i, item in enumerate(items):
            _check(item, shape, f"{key}[{i}]", file)
    for i, w in enumerate(data.get("warnings", [])):
        if w["severity"] not in SEVERITIES:
            raise DataError(f"must be one of {', '.join(SEVERITIES)}; got {w['severity']!r}"[:200],
                            file=file, field=f"warnings[{i}].severity")
    run = data.get("run")
    if not isinstance(run, dict):
        # Budget.to_dict always writes it (the title lives there); the archive needs it
        raise DataError("must be a JSON object", file=file, field="run")
    corr = run.get("input_correlations", [])
    if not isinstance(corr, list) or not all(
            isinstance(c, list) and len(c) == 3 and all(isinstance(s, str) for s in c[:2])
            and finite_number(c[2]) and -1 <= c[2] <= 1 for c in corr):
        raise DataError("must be a list of [name, name, r] with -1 <= r <= 1", file=file,
                        field="run.input_correlations")


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
    if isinstance(text, (bytes, bytearray)):
        try:
            text = bytes(text).decode("utf-8-sig")
        except UnicodeDecodeError:
            raise DataError("not UTF-8 text", file=file) from None
    try:
        data = json.loads(text, parse_constant=_reject_constant)
    except json.JSONDecodeError as exc:
        raise DataError(f"not valid JSON: {exc.msg} (column {exc.colno})", file=file,
                        line=exc.lineno) from None
    except ValueError as exc:  # NaN/Infinity, or an integer with too many digits
        raise DataError(str(exc), file=file) from None
    except RecursionError:
        raise DataError("not valid JSON: nested too deeply", file=file) from None
    _check_record(data, file)
    return data


def _budget(data: dict[str, Any], file: str | None) -> Budget:
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
    return _budget(data, file)


def record_from_text(text: str | bytes, *, file: str | None = "<record>") -> Budget:
    """Parse record text (or its UTF-8 bytes) into a Budget (see :func:`record_data`)."""
    return _budget(record_data(text, file=file), file)


def load_record(path: str | Path) -> Budget:
    """Read a result record file (UTF-8 JSON) into a Budget (see :func:`record_data`).

    Raises
    ------
    DataError
        File missing or unreadable, or any problem :func:`record_data` finds.
    """
    p, name = Path(path), str(path)
    if not p.is_file():
        raise DataError("record file not found", file=name)
    try:
        raw = p.read_bytes()
    except OSError as exc:
        raise DataError(f"cannot be read: {exc.strerror}", file=name) from None
    return record_from_text(raw, file=name)
