"""Read a stored result record (``budget run --json``) back into a Budget, or say exactly why not.

The record's shape is checked before :meth:`budget.result.Budget.from_dict` sees it, so a
hand-edited or truncated file gives a :class:`~budget.errors.DataError` naming the file and the
field (``measurands[0].terms[2].sensitivity``) instead of a KeyError.
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

from ..errors import BudgetError, DataError
from ..result import SCHEMA, Budget

__all__ = ["load_record", "record_from_text"]

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


def _check(obj: Any, shape: dict[str, Any], where: str, file: str) -> None:
    if not isinstance(obj, dict):
        raise DataError("must be a JSON object", file=file, field=where)
    for key, kind in shape.items():
        f = f"{where}.{key}" if where else key
        if key not in obj:
            raise DataError("is missing", file=file, field=f)
        v = obj[key]
        if kind == _NUM:
            ok = isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
            what = "a finite number"
        elif kind is int:
            ok = isinstance(v, int) and not isinstance(v, bool)
            what = "an integer"
        else:
            ok = isinstance(v, kind)
            what = {str: "text", list: "a list", dict: "an object", bool: "true or false"}[kind]
        if not ok:
            raise DataError(f"must be {what}; got {v!r}"[:200], file=file, field=f)


def _reject_constant(name: str):
    raise ValueError(f"{name} is not allowed in a record")


def record_from_text(text: str, *, file: str = "<record>") -> Budget:
    """Parse record text into a Budget.

    Raises
    ------
    DataError
        Not JSON, another schema, or a field missing or of the wrong kind.
    """
    try:
        data = json.loads(text, parse_constant=_reject_constant)
    except json.JSONDecodeError as exc:
        raise DataError(f"not valid JSON: {exc.msg} (column {exc.colno})", file=file,
                        line=exc.lineno) from None
    except ValueError as exc:
        raise DataError(str(exc), file=file) from None
    if not isinstance(data, dict):
        raise DataError("must be a JSON object (a result record from 'budget run --json')",
                        file=file)
    schema = data.get("schema")
    if schema != SCHEMA:
        raise DataError(f"is {schema!r}, this version reads {SCHEMA!r}", file=file,
                        field="schema")
    if not isinstance(data.get("measurands"), list) or not data["measurands"]:
        raise DataError("must be a non-empty list", file=file, field="measurands")
    for i, m in enumerate(data["measurands"]):
        _check(m, _MEASURAND, f"measurands[{i}]", file)
        for j, t in enumerate(m["terms"]):
            _check(t, _TERM, f"measurands[{i}].terms[{j}]", file)
    for key in ("monte_carlo", "inputs"):
        if not isinstance(data.get(key, []), list):
            raise DataError("must be a list", file=file, field=key)
    for i, mc in enumerate(data.get("monte_carlo", [])):
        _check(mc, _MC, f"monte_carlo[{i}]", file)
    for i, q in enumerate(data.get("inputs", [])):
        _check(q, _INPUT, f"inputs[{i}]", file)
    if not isinstance(data.get("run", {}), dict):
        raise DataError("must be a JSON object", file=file, field="run")
    try:
        return Budget.from_dict(data)
    except BudgetError as exc:
        raise DataError(exc.message, file=file, field=exc.field) from None
    except (KeyError, TypeError, ValueError, IndexError) as exc:
        # a field the checks above do not cover (e.g. a distribution's parameters)
        raise DataError(f"cannot be read: {type(exc).__name__}: {exc}", file=file,
                        field="record") from None


def load_record(path: str | Path) -> Budget:
    """Read a result record file (UTF-8 JSON) into a Budget (see :func:`record_from_text`)."""
    p = Path(path)
    if not p.is_file():
        raise DataError("record file not found", file=str(path))
    try:
        text = p.read_bytes().decode("utf-8-sig")
    except UnicodeDecodeError:
        raise DataError("not UTF-8 text", file=str(path)) from None
    except OSError as exc:
        raise DataError(f"cannot be read: {exc.strerror}", file=str(path)) from None
    return record_from_text(text, file=str(path))
