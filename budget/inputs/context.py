"""The context an input module receives, and the option checks every module shares."""

from __future__ import annotations

import hashlib
import os
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..errors import DataError, SpecError
from ..numbers import NumberError, checked, checked_int, is_number, shown
from ..quantity import FileRef

__all__ = ["InputContext", "sha256_file"]

_MISSING = object()


def sha256_file(path: Path) -> str:
    """Hex SHA-256 of a file's bytes (read in 1 MiB blocks)."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


@dataclass(frozen=True)
class InputContext:
    """Everything an input module may look at.

    Parameters
    ----------
    name : str
        The input's name (``[inputs.NAME]``).
    table : dict
        The TOML table of the input, as loaded.
    folder : Path
        The spec's folder; relative file names are resolved against it.
    spec_file : str
        The spec's path as the user gave it (for error messages).
    lines : dict
        ``key -> line number`` inside this input's table, and ``""`` -> the header line.
    """

    name: str
    table: dict[str, Any]
    folder: Path
    spec_file: str = "<spec>"
    lines: dict[str, int] = field(default_factory=dict)

    @property
    def line(self) -> int | None:
        """Line of the ``[inputs.NAME]`` header in the spec, when known."""
        return self.lines.get("")

    def key_line(self, key: str) -> int | None:
        return self.lines.get(key, self.line)

    def spec_error(self, key: str, message: str) -> SpecError:
        """A SpecError located at ``[inputs.NAME] key``."""
        return SpecError(message, file=self.spec_file, line=self.key_line(key),
                         field=f"inputs.{self.name}.{key}")

    # ------------------------------------------------------------------ options
    def option(self, key: str, kind: type | tuple[type, ...], default: Any = _MISSING, *,
               check: Callable[[Any], bool] | None = None, must: str = "") -> Any:
        """Read option ``key`` of type ``kind``; refuse a wrong type or a failed ``check``.

        ``int`` is accepted where ``float`` is asked for. Booleans are never numbers. A float
        option must be finite. ``must`` completes the message "must be ..." for a failed check.
        """
        if key not in self.table:
            if default is _MISSING:
                raise self.spec_error(key, "is required")
            return default
        v = self.table[key]
        kinds = kind if isinstance(kind, tuple) else (kind,)
        if float in kinds and is_number(v):
            try:  # finite and representable (a 400-digit TOML integer is not)
                v = checked(v)
            except NumberError as exc:
                raise self.spec_error(key, str(exc)) from None
        elif int in kinds and is_number(v) and isinstance(v, int):
            try:  # a count or a seed must fit the 64-bit integers numpy works with
                v = checked_int(v, lo=-(2 ** 63), hi=2 ** 63 - 1, must="a 64-bit integer")
            except NumberError as exc:
                raise self.spec_error(key, str(exc)) from None
        if isinstance(v, bool) and bool not in kinds:
            raise self.spec_error(key, f"must be {_kind_name(kinds)}; got {shown(v)}")
        if not isinstance(v, kinds):
            raise self.spec_error(key, f"must be {_kind_name(kinds)}; got {shown(v)}")
        if check is not None and not check(v):
            raise self.spec_error(key, f"must be {must or 'valid'}; got {shown(v)}")
        return v

    def number(self, key: str, default: Any = _MISSING, *, positive: bool = False,
               nonnegative: bool = False) -> float:
        """A finite float option, optionally > 0 or ≥ 0."""
        if positive:
            return self.option(key, float, default, check=lambda x: x > 0, must="> 0")
        if nonnegative:
            return self.option(key, float, default, check=lambda x: x >= 0, must=">= 0")
        return self.option(key, float, default)

    def choice(self, key: str, choices: tuple[str, ...], default: Any = _MISSING) -> str:
        from ..errors import did_you_mean
        v = self.option(key, str, default)
        if v not in choices:
            raise self.spec_error(key, f"must be one of {', '.join(choices)}; got {shown(v)}"
                                       f"{did_you_mean(v, choices)}")
        return v

    # ------------------------------------------------------------------ files
    def files(self, key: str = "file", many_key: str = "files") -> list[Path]:
        """The data file(s) of this input: ``file = "x.csv"`` or ``files = ["a.csv", ...]``."""
        if key in self.table and many_key in self.table:
            raise self.spec_error(many_key, f"give either '{key}' or '{many_key}', not both")
        if many_key in self.table:
            names = self.table[many_key]
            if not (isinstance(names, list) and names and all(isinstance(n, str) for n in names)):
                raise self.spec_error(many_key, "must be a non-empty list of file names")
            return [self.path_of(n, many_key) for n in names]
        return [self.path_of(self.option(key, str), key)]

    def path_of(self, name: str, key: str = "file") -> Path:
        """Resolve a file name against the spec's folder; refuse a missing file."""
        p = Path(name)
        if not p.is_absolute():
            p = self.folder / p
        if p.is_dir():
            raise self.spec_error(key, f"is a folder, not a data file: {name}")
        if not p.is_file():
            raise self.spec_error(key, f"file not found: {name}")
        return p

    def file_ref(self, path: Path, rows: str = "") -> FileRef:
        """A FileRef (path relative to the spec folder where possible, digest, rows)."""
        # relative to the spec's folder (with ../ when outside it), so that records do not
        # depend on where the project happens to be checked out
        shown = os.path.relpath(path.resolve(), self.folder.resolve())
        return FileRef(path=shown, sha256=sha256_file(path), rows=rows)

    def display(self, path: Path) -> str:
        """How to name a data file in an error message: relative to the working folder when
        it lies below it (as the user would type it), else the absolute path."""
        try:
            rel = os.path.relpath(path)
        except ValueError:  # pragma: no cover - another drive on Windows
            return str(path)
        return str(path) if rel.startswith("..") else rel

    def data_error(self, path: Path, message: str, *, row: int | None = None,
                   column: str | None = None) -> DataError:
        return DataError(message, file=self.display(path), row=row, field=column)


def _kind_name(kinds: tuple[type, ...]) -> str:
    names = {float: "a number", int: "an integer", str: "a string", bool: "true or false",
             list: "a list", dict: "a table"}
    return " or ".join(names.get(k, k.__name__) for k in kinds)
