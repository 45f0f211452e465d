"""Reading the CSV tables of input modules, with errors that name file, row and column.

Row numbers in messages are 1-based *data* rows (the header is not counted), so "row 3" is the
third line after the header — the same numbering as the ``rows`` field of a FileRef.
"""

from __future__ import annotations

import csv
import io
import re
from collections.abc import Iterable, Mapping
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import DataError, did_you_mean
from .column_units import ColumnUnit, resolve_units, split_header

__all__ = ["read_text", "decode_text", "read_table", "numeric_column", "date_column",
           "row_ranges"]


def decode_text(raw: bytes, shown: str) -> str:
    """The text of a data file's bytes: UTF-8, a leading byte-order mark dropped.

    Raises
    ------
    DataError
        NUL bytes in the first 64 KiB (a binary file), or bytes that are not UTF-8 (with the
        offset and line of the first bad byte).
    """
    if b"\x00" in raw[:65536]:
        raise DataError("not a text file (contains NUL bytes)", file=shown)
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise DataError(f"not UTF-8 text (bad byte at offset {exc.start}, line {line})",
                        file=shown) from None


def read_text(path: Path, shown: str | None = None) -> str:
    """Read a data file as text (see :func:`decode_text`); ``shown`` names it in messages
    (default ``str(path)``)."""
    return decode_text(path.read_bytes(), shown or str(path))


def read_table(path: Path, required: Iterable[str], optional: Iterable[str] = (), *,
               shown: str | None = None, min_rows: int = 1,
               units: Mapping[str, ColumnUnit] | None = None) -> pd.DataFrame:
    """Read a UTF-8 CSV file with a header row into a DataFrame of strings.

    A header cell may carry a unit in brackets, ``value [GΩ]``
    (:mod:`budget.inputs.column_units`): the column is then ``value`` and its parsed unit is
    in ``df.attrs["units"]`` (read it with :func:`~budget.inputs.column_units.column_unit`).

    Parameters
    ----------
    path : Path
        The file.
    required, optional : iterable of str
        Column names; a missing required column is an error with a did-you-mean, and columns
        outside both lists are refused (a misspelt optional column must not be ignored).
    shown : str, optional
        File name for messages (default ``str(path)``).
    min_rows : int
        Fewest data rows accepted. Default 1.
    units : mapping, optional
        Column -> :class:`~budget.inputs.column_units.ColumnUnit` for the columns that may
        carry a unit in the header (its dimension is checked); a unit on any other column is
        refused. Default: none may.
    """
    shown = shown or str(path)
    text = read_text(path, shown)
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise DataError("file is empty (no header row)", file=shown)
    # A data row with more fields than the header makes pandas take the first column as the
    # row index, shifting every value one column to the left: refuse it by row instead.
    # (Shorter rows are left to pandas: their missing cells read as blank and each column's
    # own check decides whether a blank is allowed.)
    rows = csv.reader(lines, skipinitialspace=True)
    width = len(next(rows))
    for i, fields in enumerate(rows, start=1):
        if len(fields) > width:
            raise DataError(f"has {len(fields)} fields; the header has {width}", file=shown,
                            row=i)
    try:
        df = pd.read_csv(io.StringIO("\n".join(lines)), dtype=str, keep_default_na=False,
                         skipinitialspace=True)
    except (pd.errors.ParserError, ValueError) as exc:
        msg = " ".join(str(exc).split())
        raise DataError(f"cannot read as CSV: {msg}", file=shown) from None
    names, header_units = split_header(df.columns)
    df.columns = names
    required, optional = list(required), list(optional)
    known = required + optional
    seen = set()
    for c in df.columns:
        if c in seen:
            raise DataError("column appears twice in the header", file=shown, field=c)
        seen.add(c)
        if c not in known:
            raise DataError(f"unknown column{did_you_mean(c, known)} (expected: "
                            f"{', '.join(known)})", file=shown, field=c)
    for c in required:
        if c not in df.columns:
            raise DataError(f"missing column{did_you_mean(c, df.columns)}", file=shown, field=c)
    if len(df) < min_rows:
        raise DataError(f"has {len(df)} data rows; at least {min_rows} needed", file=shown)
    df.attrs["units"] = resolve_units(header_units, units, shown=shown)
    return df


def numeric_column(df: pd.DataFrame, column: str, *, shown: str, allow_blank: bool = False,
                   positive: bool = False, nonnegative: bool = False) -> np.ndarray:
    """Convert a string column to float64, refusing text, NaN and infinities by row."""
    s = df[column].str.strip()
    values = pd.to_numeric(s, errors="coerce").to_numpy(dtype=float)
    bad = ~np.isfinite(values)
    if allow_blank:
        bad &= (s != "").to_numpy()
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise DataError(f"not a finite number: {df[column].iloc[i]!r}", file=shown, row=i + 1,
                        field=column)
    if positive or nonnegative:
        viol = ~(values > 0) if positive else ~(values >= 0)
        if allow_blank:
            viol &= (s != "").to_numpy()
        if viol.any():
            i = int(np.flatnonzero(viol)[0])
            need = "> 0" if positive else ">= 0"
            raise DataError(f"must be {need}; got {df[column].iloc[i]!r}", file=shown,
                            row=i + 1, field=column)
    return values


#: ISO 8601 calendar date, optionally with a time and a zone (the only forms accepted:
#: "05/03/2026" would silently mean 3 May in one country and 5 March in another, and words such
#: as "today" would make a record depend on when it was computed)
_ISO = re.compile(r"^\d{4}-\d{2}-\d{2}([T ]\d{2}:\d{2}(:\d{2}(\.\d+)?)?(Z|[+-]\d{2}(:?\d{2})?)?)?$")


def parse_iso(text: str) -> pd.Timestamp | None:
    """An ISO 8601 date or date-time as a naive UTC Timestamp, or None when it is not one."""
    t = str(text).strip()
    if not _ISO.match(t):
        return None
    try:
        ts = pd.Timestamp(t)
    except (ValueError, TypeError, OverflowError):
        return None
    if pd.isna(ts):
        return None
    if ts.tzinfo is not None:
        ts = ts.tz_convert("UTC").tz_localize(None)
    return ts


def date_column(df: pd.DataFrame, column: str, *, shown: str) -> pd.DatetimeIndex:
    """Parse ISO 8601 dates (or date-times), refusing anything else by row."""
    out = []
    for i, v in enumerate(df[column]):
        ts = parse_iso(v)
        if ts is None:
            raise DataError(f"not an ISO 8601 date (YYYY-MM-DD[THH:MM[:SS]]): {v!r}", file=shown,
                            row=i + 1, field=column)
        out.append(ts)
    return pd.DatetimeIndex(out)


def row_ranges(indices: Iterable[int]) -> str:
    """Compress 1-based row numbers into ``"1-5, 8, 10-12"``."""
    idx = sorted(set(int(i) for i in indices))
    if not idx:
        return ""
    parts, start, prev = [], idx[0], idx[0]
    for i in idx[1:]:
        if i == prev + 1:
            prev = i
            continue
        parts.append(f"{start}-{prev}" if prev > start else f"{start}")
        start = prev = i
    parts.append(f"{start}-{prev}" if prev > start else f"{start}")
    return ", ".join(parts)
