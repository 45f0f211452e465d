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
from functools import cache
from importlib import resources
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
    """
    root = schema if root is None else root
    must = schema.get("x-must")
    if must is None:
        _validate(data, schema, root, path)
        return
    try:
        _validate(data, schema, root, path)
    except SchemaViolation as exc:
        if len(exc.path) > len(path):  # a nested key failed: its own message says more
            raise
        raise SchemaViolation(path, f"must be {must}; got {shown(data)}") from None


def _validate(data: Any, schema: dict[str, Any], root: dict[str, Any],
              path: tuple[str | int, ...]) -> None:
    for key in schema:
        if key not in _KEYWORDS and key not in _IGNORED:
            raise KeyError(f"schema keyword {key!r} is not supported by budget.schema")
    if "$ref" in schema:
        ref = schema["$ref"]
        if not ref.startswith("#/$defs/"):
            raise KeyError(f"only local $ref to #/$defs/ is supported; got {ref!r}")
        validate(data, root["$defs"][ref[len("#/$defs/"):]], root=root, path=path)
    if "anyOf" in schema:
        errors = []
        for sub in schema["anyOf"]:
            try:
                validate(data, sub, root=root, path=path)
                break
            except SchemaViolation as exc:
                errors.append(exc)
        else:
            # the branch that got furthest into the data says the most
            raise max(errors, key=lambda e: len(e.path))
    if "type" in schema:
        types = schema["type"] if isinstance(schema["type"], list) else [schema["type"]]
        if not any(_is_type(data, t) for t in types):
            words = " or ".join(_TYPE_WORDS[t] for t in types)
            raise SchemaViolation(path, f"must be {words}; got {shown(data)}")
        if ("number" in types or "integer" in types) and _is_type(data, "number"):
            _number(data, schema, path)
    if "enum" in schema and data not in schema["enum"]:
        raise SchemaViolation(path, f"must be one of {', '.join(map(str, schema['enum']))}; "
                                    f"got {shown(data)}")
    if "const" in schema and data != schema["const"]:
        raise SchemaViolation(path, f"must be {shown(schema['const'])}; got {shown(data)}")
    if isinstance(data, str):
        if len(data) < schema.get("minLength", 0):
            raise SchemaViolation(path, "must not be empty" if schema["minLength"] == 1 else
                                  f"must have at least {schema['minLength']} characters")
        if "maxLength" in schema and len(data) > schema["maxLength"]:
            raise SchemaViolation(path, f"must have at most {schema['maxLength']} characters")
    if isinstance(data, dict):
        _object(data, schema, root, path)
    if isinstance(data, list):
        _array(data, schema, root, path)


def _number(v, schema, path) -> None:
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


def _object(data: dict, schema, root, path) -> None:
    props = schema.get("properties", {})
    for key in schema.get("required", ()):
        if key not in data:
            raise SchemaViolation(path + (key,), "is missing")
    names = schema.get("propertyNames")
    extra = schema.get("additionalProperties", True)
    for key, value in data.items():
        if names is not None and not re.fullmatch(names["pattern"], key):
            raise SchemaViolation(path + (key,), "is not an allowed name")
        if key in props:
            validate(value, props[key], root=root, path=path + (key,))
        elif extra is False:
            raise SchemaViolation(path + (key,), "is not a known key")
        elif isinstance(extra, dict):
            validate(value, extra, root=root, path=path + (key,))


def _array(data: list, schema, root, path) -> None:
    if len(data) < schema.get("minItems", 0):
        raise SchemaViolation(path, "must not be empty" if schema["minItems"] == 1 else
                              f"must have at least {schema['minItems']} entries; got "
                              f"{len(data)}")
    if "maxItems" in schema and len(data) > schema["maxItems"]:
        raise SchemaViolation(path, f"must have at most {schema['maxItems']} entries; got "
                                    f"{len(data)}")
    prefix = schema.get("prefixItems", [])
    for i, item in enumerate(data):
        sub = prefix[i] if i < len(prefix) else schema.get("items")
        if sub is False:
            raise SchemaViolation(path, f"must have at most {len(prefix)} entries; got "
                                        f"{len(data)}")
        if sub is not None and sub is not True:
            validate(item, sub, root=root, path=path + (i,))


_KEYWORDS = {"type", "properties", "required", "additionalProperties", "propertyNames",
             "items", "prefixItems", "minItems", "maxItems", "enum", "const", "minimum",
             "maximum", "exclusiveMinimum", "exclusiveMaximum", "minLength", "maxLength",
             "anyOf", "$ref"}
