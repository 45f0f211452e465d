"""A small validator for the subset of JSON Schema (draft 2020-12) that the shipped schemas use.

The schemas themselves are data files in ``budget/schemas/`` (package data): ``record.schema.json``
for result records and ``spec.schema.json`` for the sections of a budget spec. They are the one
place where the type of each known key is declared; the loaders call :func:`validate` before any
other code sees the data, so that code may rely on the types.

Keywords understood: ``type`` (a name or a list of names), ``properties``, ``required``,
``additionalProperties`` (true, false or a schema), ``propertyNames`` with ``pattern``,
``items``, ``prefixItems``, ``minItems``, ``maxItems``, ``enum``, ``const``, ``minimum``,
``maximum``, ``exclusiveMinimum``, ``exclusiveMaximum``, ``minLength``, ``maxLength``,
``anyOf``, ``$ref`` (to ``#/$defs/NAME``) and ``description``/``title``/``$schema``/``$id``/
``$comment`` (ignored). An unknown keyword in a schema is a programming error (KeyError), so a
schema cannot silently ask for a check that is not made.

Two deliberate differences from the standard, both stricter: a ``number`` must be finite and
representable as a float64 (JSON allows a 400-digit integer; :mod:`budget.numbers`), and a
boolean is never a number or an integer (as in the standard).
"""

from __future__ import annotations

import json
import re
from collections.abc import Callable
from functools import cache
from importlib import resources
from math import isfinite as _isfinite
from typing import Any

from .numbers import NumberError, checked, shown

__all__ = ["SchemaViolation", "validate", "load_schema", "path_text"]

_IGNORED = {"description", "title", "$schema", "$id", "$comment", "$defs", "default",
            "examples", "x-must"}
_TYPE_WORDS = {"object": "an object", "array": "a list", "string": "a string",
               "number": "a number", "integer": "an integer", "boolean": "true or false",
               "null": "null"}


class SchemaViolation(ValueError):
    """Data that do not fit a schema: ``path`` (keys and indices) and ``message``."""

    def __init__(self, path: tuple[str | int, ...], message: str):
        super().__init__(message)
        self.path = path
        self.message = message


def path_text(path: tuple[str | int, ...]) -> str:
    """``("measurands", 0, "terms")`` → ``"measurands[0].terms"``."""
    out = ""
    for p in path:
        out += f"[{p}]" if isinstance(p, int) else (f".{p}" if out else str(p))
    return out


@cache
def load_schema(name: str) -> dict[str, Any]:
    """A schema shipped in ``budget/schemas/`` by file name, e.g. ``"record.schema.json"``."""
    text = resources.files("budget").joinpath("schemas", name).read_text("utf-8")
    return json.loads(text)


def _is_type(v: Any, t: str) -> bool:
    if t == "object":
        return isinstance(v, dict)
    if t == "array":
        return isinstance(v, list)
    if t == "string":
        return isinstance(v, str)
    if t == "boolean":
        return isinstance(v, bool)
    if t == "null":
        return v is None
    if t == "integer":
        return isinstance(v, int) and not isinstance(v, bool)
    if t == "number":
        return isinstance(v, (int, float)) and not isinstance(v, bool)
    raise KeyError(f"unknown JSON Schema type {t!r}")


def validate(data: Any, schema: dict[str, Any], *, root: dict[str, Any] | None = None,
             path: tuple[str | int, ...] = ()) -> None:
    """Raise :class:`SchemaViolation` at the first place where ``data`` does not fit.

    A schema node may carry ``"x-must": "1 or 2"`` (an annotation, ignored by other
    validators): a failure of that node's own checks then reads "must be 1 or 2; got ...".

    The schema is turned once into a tree of small checking functions (kept for the life of
    the process, keyed by the schema object), so a record's hundreds of nodes are not
    re-interpreted on every call; the checks, their order and the messages are those listed
    in the module docstring. An unknown keyword anywhere in the schema raises KeyError on the
    first call.
    """
    check = _compiled(schema, schema if root is None else root)
    try:
        check(data)
    except SchemaViolation as exc:
        if path:
            exc.path = path + exc.path
        raise


_Check = Callable[[Any], None]
#: (id(schema), id(root)) -> (schema, root, check); schema and root are kept so ids stay unique
_CACHE: dict[tuple[int, int], tuple[dict, dict, _Check]] = {}


#: nodes being compiled: a $ref back to one of them (a recursive schema) is bound late
_BUSY: set[tuple[int, int]] = set()


def _compiled(schema: dict[str, Any], root: dict[str, Any]) -> _Check:
    key = (id(schema), id(root))
    hit = _CACHE.get(key)
    if hit is not None and hit[0] is schema and hit[1] is root:
        return hit[2]
    if key in _BUSY:
        def check_late(data):
            _CACHE[key][2](data)
        return check_late
    _BUSY.add(key)
    try:
        check = _compile(schema, root)
    finally:
        _BUSY.discard(key)
    _CACHE[key] = (schema, root, check)
    return check


def _compile(schema: dict[str, Any], root: dict[str, Any]) -> _Check:
    """The checks of one schema node in order: $ref, anyOf, type (and number range), enum,
    const, string length, object members, list items; violations carry paths relative to the
    node (the callers prepend their key)."""
    for key in schema:
        if key not in _KEYWORDS and key not in _IGNORED:
            raise KeyError(f"schema keyword {key!r} is not supported by budget.schema")
    checks: list[_Check] = []
    if "$ref" in schema:
        ref = schema["$ref"]
        if not ref.startswith("#/$defs/"):
            raise KeyError(f"only local $ref to #/$defs/ is supported; got {ref!r}")
        checks.append(_compiled(root["$defs"][ref[len("#/$defs/"):]], root))
    if "anyOf" in schema:
        subs = [_compiled(sub, root) for sub in schema["anyOf"]]

        def check_any(data):
            errors = []
            for sub in subs:
                try:
                    sub(data)
                    return
                except SchemaViolation as exc:
                    errors.append(exc)
            # the branch that got furthest into the data says the most
            raise max(errors, key=lambda e: len(e.path))
        checks.append(check_any)
    if "type" in schema:
        checks.append(_type_check(schema))
    if "enum" in schema:
        enum = schema["enum"]

        def check_enum(data):
            if data not in enum:
                raise SchemaViolation((), f"must be one of {', '.join(map(str, enum))}; "
                                          f"got {shown(data)}")
        checks.append(check_enum)
    if "const" in schema:
        const = schema["const"]

        def check_const(data):
            if data != const:
                raise SchemaViolation((), f"must be {shown(const)}; got {shown(data)}")
        checks.append(check_const)
    if "minLength" in schema or "maxLength" in schema:
        checks.append(_string_check(schema))
    obj = _object_check(schema, root)
    if obj is not None:
        checks.append(obj)
    arr = _array_check(schema, root)
    if arr is not None:
        checks.append(arr)
    check = _sequence(checks)
    must = schema.get("x-must")
    if must is None:
        return check

    def check_must(data):
        try:
            check(data)
        except SchemaViolation as exc:
            if exc.path:  # a nested key failed: its own message says more
                raise
            raise SchemaViolation((), f"must be {must}; got {shown(data)}") from None
    return check_must


def _sequence(checks: list[_Check]) -> _Check:
    if not checks:
        return lambda data: None
    if len(checks) == 1:
        return checks[0]

    def check_all(data):
        for c in checks:
            c(data)
    return check_all


def _type_check(schema: dict[str, Any]) -> _Check:
    types = schema["type"] if isinstance(schema["type"], list) else [schema["type"]]
    for t in types:
        _is_type(None, t)                   # an unknown type name is a KeyError now
    words = " or ".join(_TYPE_WORDS[t] for t in types)
    numeric = "number" in types or "integer" in types
    ranged = any(k in schema for k in ("minimum", "maximum", "exclusiveMinimum",
                                       "exclusiveMaximum"))
    if len(types) == 1 and types[0] in _PLAIN:
        cls = _PLAIN[types[0]]

        def check_plain(data):
            if not isinstance(data, cls):
                raise SchemaViolation((), f"must be {words}; got {shown(data)}")
        return check_plain
    if types == ["number"] and not ranged:
        def check_number(data):
            if type(data) is float and _isfinite(data):   # the common case, as checked()
                return
            if isinstance(data, bool) or not isinstance(data, (int, float)):
                raise SchemaViolation((), f"must be {words}; got {shown(data)}")
            try:
                checked(data)
            except NumberError as exc:
                raise SchemaViolation((), str(exc)) from None
        return check_number

    takes_float, takes_null = "number" in types, "null" in types
    bounds = [(k, schema[k]) for k in ("minimum", "maximum", "exclusiveMinimum",
                                       "exclusiveMaximum") if k in schema]

    def check_type(data):
        # the common cases first, with the outcome of the general test below
        if data is None and takes_null:
            return
        if type(data) is float and takes_float and _isfinite(data) and (
                not bounds or _within_bounds(data, bounds)):
            return
        if not any(_is_type(data, t) for t in types):
            raise SchemaViolation((), f"must be {words}; got {shown(data)}")
        if numeric and _is_type(data, "number"):
            _number(data, schema, ())
    return check_type


def _within_bounds(x: float, bounds: list[tuple[str, Any]]) -> bool:
    """Whether ``x`` passes every range keyword (the violation itself is :func:`_number`'s)."""
    for key, b in bounds:
        if (key == "minimum" and x < b) or (key == "maximum" and x > b) or \
                (key == "exclusiveMinimum" and x <= b) or (key == "exclusiveMaximum" and x >= b):
            return False
    return True


#: types whose test is one isinstance (bool is not an int here: it has its own type name)
_PLAIN = {"object": dict, "array": list, "string": str, "boolean": bool}


def _string_check(schema: dict[str, Any]) -> _Check:
    lo, hi = schema.get("minLength", 0), schema.get("maxLength")

    def check_string(data):
        if isinstance(data, str):
            if len(data) < lo:
                raise SchemaViolation((), "must not be empty" if lo == 1 else
                                      f"must have at least {lo} characters")
            if hi is not None and len(data) > hi:
                raise SchemaViolation((), f"must have at most {hi} characters")
    return check_string


def _number(v, schema, path) -> None:
    if type(v) is float and _isfinite(v):      # what checked() returns for a finite float
        x = v
    else:
        try:
            x = checked(v)
        except NumberError as exc:
            raise SchemaViolation(path, str(exc)) from None
    lo, hi = schema.get("minimum"), schema.get("maximum")
    xlo, xhi = schema.get("exclusiveMinimum"), schema.get("exclusiveMaximum")
    if lo is not None and x < lo:
        raise SchemaViolation(path, f"must be >= {lo:g}; got {shown(v)}")
    if hi is not None and x > hi:
        raise SchemaViolation(path, f"must be <= {hi:g}; got {shown(v)}")
    if xlo is not None and x <= xlo:
        raise SchemaViolation(path, f"must be > {xlo:g}; got {shown(v)}")
    if xhi is not None and x >= xhi:
        raise SchemaViolation(path, f"must be < {xhi:g}; got {shown(v)}")


def _object_check(schema: dict[str, Any], root: dict[str, Any]) -> _Check | None:
    required = tuple(schema.get("required", ()))
    props = {k: _compiled(v, root) for k, v in schema.get("properties", {}).items()}
    names = schema.get("propertyNames")
    pattern = None if names is None else re.compile(names["pattern"])
    extra = schema.get("additionalProperties", True)
    extra_check = _compiled(extra, root) if isinstance(extra, dict) else None
    if not (required or props or pattern is not None or extra is False or extra_check):
        return None

    def check_object(data):
        if not isinstance(data, dict):
            return
        for key in required:
            if key not in data:
                raise SchemaViolation((key,), "is missing")
        for key, value in data.items():
            if pattern is not None and not pattern.fullmatch(key):
                raise SchemaViolation((key,), "is not an allowed name")
            sub = props.get(key)
            if sub is None:
                if extra is False:
                    raise SchemaViolation((key,), "is not a known key")
                sub = extra_check
                if sub is None:
                    continue
            try:
                sub(value)
            except SchemaViolation as exc:      # its path, relative to the member, gains key
                exc.path = (key,) + exc.path
                raise
    return check_object


def _array_check(schema: dict[str, Any], root: dict[str, Any]) -> _Check | None:
    lo, hi = schema.get("minItems", 0), schema.get("maxItems")
    raw_prefix = schema.get("prefixItems", [])
    prefix = [p if isinstance(p, bool) else _compiled(p, root) for p in raw_prefix]
    items = schema.get("items")
    rest = items if items is None or isinstance(items, bool) else _compiled(items, root)
    if not (lo or hi is not None or prefix or (rest is not None and rest is not True)):
        return None

    def check_array(data):
        if not isinstance(data, list):
            return
        if len(data) < lo:
            raise SchemaViolation((), "must not be empty" if lo == 1 else
                                  f"must have at least {lo} entries; got {len(data)}")
        if hi is not None and len(data) > hi:
            raise SchemaViolation((), f"must have at most {hi} entries; got {len(data)}")
        for i, item in enumerate(data):
            sub = prefix[i] if i < len(prefix) else rest
            if sub is False:
                raise SchemaViolation((), f"must have at most {len(prefix)} entries; got "
                                          f"{len(data)}")
            if sub is not None and sub is not True:
                try:
                    sub(item)
                except SchemaViolation as exc:
                    exc.path = (i,) + exc.path
                    raise
    return check_array


_KEYWORDS = {"type", "properties", "required", "additionalProperties", "propertyNames",
             "items", "prefixItems", "minItems", "maxItems", "enum", "const", "minimum",
             "maximum", "exclusiveMinimum", "exclusiveMaximum", "minLength", "maxLength",
             "anyOf", "$ref"}
