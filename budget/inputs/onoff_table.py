"""Fast, strict reading of an on/off record (columns ``time_s``, ``reading``, ``pump``).

The general :func:`budget.inputs.tables.read_table` keeps every cell as text, which costs about
seven seconds for a record of 10⁶ readings; this reader lets pandas parse numbers in C and only
falls back to text for a column that did not parse, to find the offending row. The common case
is read by :mod:`budget.inputs.onoff_parse` (straight to float64, in pieces side by side), which
declines anything this general reading could treat differently. Row numbers
follow :mod:`budget.inputs.tables`: 1-based data rows, header excluded, blank lines and lines
starting with ``#`` not counted, counted as pandas reads the file (lines end at ``\\n``,
``\\r\\n`` or ``\\r``; a quoted field may span lines). A ``#`` after blanks, or a blank line
holding a form feed or vertical tab, is refused with its line: pandas would read it as data.
"""

from __future__ import annotations

import io
import re
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import DataError, did_you_mean
from .onoff_parse import pump_states, read_bytes_plain, read_pieces
from .tables import decode_text

__all__ = ["COLUMNS", "OnOffTable", "read_onoff", "mask_ranges"]

COLUMNS = ("time_s", "reading", "pump")
#: the fast paths of :mod:`budget.inputs.onoff_parse` (off: the general reading only)
_FAST = True


@dataclass(frozen=True)
class OnOffTable:
    """One record: times (s), readings (reading unit) and pump state (True = on)."""

    path: Path
    shown: str
    time: np.ndarray
    reading: np.ndarray
    on: np.ndarray

    @property
    def rows(self) -> int:
        return len(self.time)


def _header(text: str, shown: str) -> list[str]:
    pos = 0
    while pos < len(text):           # walk line by line without copying the whole text
        end = text.find("\n", pos)
        end = len(text) if end < 0 else end
        line = text[pos:end]
        if line.strip() and not line.lstrip().startswith("#"):
            return [c.strip().strip('"') for c in line.rstrip("\r").split(",")]
        pos = end + 1
    raise DataError("file is empty (no header row)", file=shown)


def _head_text(raw: bytes, shown: str) -> str:
    """The text of the first MiB (enough for the header), or of the whole file when the header
    may lie further on; bad bytes there are refused as :func:`decode_text` does. Decoding all
    of a 10⁷-row record only to read its first line cost a quarter of a second; pandas checks
    the rest while it parses."""
    head = raw[:1 << 20]
    if len(head) == len(raw) or b"\x00" in raw[:65536]:
        return decode_text(raw, shown)
    cut = head.rfind(b"\n") + 1                  # whole lines only: no split character
    text = decode_text(head[:cut], shown)
    if not any(ln.strip() and not ln.lstrip().startswith("#") for ln in text.split("\n")):
        return decode_text(raw, shown)
    return text


def _columns(text: str, shown: str) -> list[str]:
    cols = _header(text, shown)
    _check_columns(cols, shown)
    return cols


def _check_columns(cols: list[str], shown: str) -> None:
    seen = set()
    for c in cols:
        if c in seen:
            raise DataError("column appears twice in the header", file=shown, field=c)
        seen.add(c)
        if c not in COLUMNS:
            raise DataError(f"unknown column{did_you_mean(c, COLUMNS)} (expected: "
                            f"{', '.join(COLUMNS)})", file=shown, field=c or "(empty)")
    for c in COLUMNS:
        if c not in cols:
            raise DataError(f"missing column{did_you_mean(c, cols)}", file=shown, field=c)


#: lines a reader takes for a comment or a blank line but pandas reads as a data row (or as the
#: header): ``#`` after blanks, or blanks that include a form feed or vertical tab
_MISREAD = re.compile(rb"^[ \t\f\v]+#|^[ \t\f\v]*[\f\v][ \t\f\v]*\r?$", re.MULTILINE)


def _check_layout(raw: bytes, shown: str) -> None:
    """Refuse a line that pandas (``comment='#'`` acts only on a ``#`` in column 1 or after a
    field) would read differently from a person: an indented comment, or a line of blanks
    holding a form feed or vertical tab. The line is 1-based, counted at ``\\n``."""
    m = _MISREAD.search(raw)
    if m is None:
        return
    line = raw.count(b"\n", 0, m.start()) + 1
    if raw[m.end() - 1:m.end()] == b"#":
        what = "a comment must start in column 1 (this line has blanks before '#')"
    else:
        what = "a line of blanks holds a form feed or vertical tab; make it empty"
    raise DataError(what, file=shown, line=line)


def _field_counts(text: str):
    """The number of fields of each record (header first) as pandas' C tokenizer counts them
    with ``comment='#'``, ``quotechar='"'`` and ``skipinitialspace``: lines end at ``\\n``,
    ``\\r\\n`` or ``\\r`` (not at the other breaks of :meth:`str.splitlines`); a line of
    spaces and tabs or starting with ``#`` is skipped; ``#`` outside quotes ends the record;
    a quoted field may hold commas, ``#`` and line breaks."""
    state = None                     # None: at the start of a record
    k = 0
    for ln in io.StringIO(text, newline=""):
        ln = ln.rstrip("\r\n")
        if state is None:
            if not ln.strip(" \t") or ln.startswith("#"):
                continue
            if '"' not in ln:                        # the common line: no character loop
                yield ln.split("#", 1)[0].count(",") + 1
                continue
            state, k = "start", 0
        for c in ln:
            if state == "start":                     # at a field's start
                if c == " ":
                    continue
                if c == '"':
                    state = "quoted"
                elif c == ",":
                    k += 1
                elif c == "#":
                    break
                else:
                    state = "field"
            elif state == "field":
                if c == ",":
                    k, state = k + 1, "start"
                elif c == "#":
                    break
            elif state == "quoted":
                if c == '"':
                    state = "quote"
            else:                                    # just after a quote inside quotes
                if c == '"':
                    state = "quoted"
                elif c == ",":
                    k, state = k + 1, "start"
                elif c == "#":
                    break
                else:
                    state = "field"
        if state == "quoted":                        # the line break belongs to the field
            continue
        yield k + 1
        state = None


def _bad_field_count(text: str, ncols: int, shown: str) -> DataError:
    """Locate the first data row with more fields than the header (pandas fills a short row
    and refuses only a long one), counting rows as :func:`_field_counts` does."""
    counts = _field_counts(text)
    next(counts, None)                               # the header
    for i, k in enumerate(counts, start=1):
        if k > ncols:
            return DataError(f"has {k} fields; the header has {ncols}", file=shown, row=i)
    return DataError("cannot read as CSV", file=shown)


def _numeric(df: pd.DataFrame, col: str, shown: str) -> np.ndarray:
    s = df[col]
    if s.dtype.kind in "iuf":
        values = s.to_numpy(dtype=float)
    else:
        values = pd.to_numeric(s.astype(str).str.strip(), errors="coerce").to_numpy(dtype=float)
    bad = ~np.isfinite(values)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raw = str(s.iloc[i]).strip()
        what = "missing value" if raw == "" else f"not a finite number: {raw!r}"
        raise DataError(what, file=shown, row=i + 1, field=col)
    return values


def _pump(df: pd.DataFrame, shown: str) -> np.ndarray:
    s = df["pump"]
    ok, on = pump_states(s)
    if not ok.all():
        i = int(np.flatnonzero(~ok)[0])
        raise DataError(f"pump state must be on/off or 1/0; got {str(s.iloc[i]).strip()!r}",
                        file=shown, row=i + 1, field="pump")
    return on.astype(bool)


def _read_general(raw: bytes, cols: list[str], shown: str) -> pd.DataFrame:
    """The reference reading: pandas infers each column (text where a value does not parse,
    so that :func:`_numeric` can name the row); every problem a located DataError."""
    _check_layout(raw, shown)
    try:
        with warnings.catch_warnings():
            # pandas only warns (and drops the field) when the first data row is too long
            warnings.simplefilter("error", pd.errors.ParserWarning)
            return pd.read_csv(io.BytesIO(raw), encoding="utf-8-sig", comment="#", header=0,
                               names=cols, index_col=False, skipinitialspace=True,
                               keep_default_na=False, na_values=[], low_memory=False,
                               dtype={"pump": "category"})   # no 10⁷ Python strings
    except (pd.errors.ParserError, pd.errors.ParserWarning):
        raise _bad_field_count(decode_text(raw, shown), len(cols), shown) from None
    except UnicodeDecodeError:
        decode_text(raw, shown)          # raises the located message (offset and line)
        raise                            # pragma: no cover - pandas and Python disagree
    except ValueError as exc:  # pragma: no cover - pandas edge cases
        raise DataError(f"cannot read as CSV: {' '.join(str(exc).split())}", file=shown) from None


def read_onoff(path: Path, shown: str | None = None) -> OnOffTable:
    """Read and check an on/off record; every problem is a DataError with file, row, column."""
    shown = shown or str(path)
    fast = read_pieces(path, lambda text: _columns(text, shown)) if _FAST else None
    if fast is None:
        raw = path.read_bytes()    # pandas parses the bytes; the text gives header and rows
        cols = _columns(_head_text(raw, shown), shown)
        fast = read_bytes_plain(raw, cols) if _FAST else None
    if fast is not None:
        time, reading, on = fast
    else:
        df = _read_general(raw, cols, shown)
        if len(df) == 0:
            raise DataError("has no data rows", file=shown)
        time = _numeric(df, "time_s", shown)
        reading = _numeric(df, "reading", shown)
        on = _pump(df, shown)
    # t[i+1] <= t[i] for finite floats is np.diff(t) <= 0 without an 80 MB array per 10⁷ rows
    not_up = time[1:] <= time[:-1]
    if not_up.any():
        i = int(np.flatnonzero(not_up)[0])
        raise DataError(f"time must increase strictly; {float(time[i + 1]):g} s follows {float(time[i]):g} s",
                        file=shown, row=i + 2, field="time_s")
    return OnOffTable(path=path, shown=shown, time=time, reading=reading, on=on)


def mask_ranges(mask: np.ndarray) -> str:
    """1-based row ranges ``"3-40, 55-90"`` of the True entries, without a loop over rows."""
    m = np.concatenate(([False], np.asarray(mask, dtype=bool), [False]))
    edges = np.flatnonzero(m[1:] != m[:-1])
    starts, stops = edges[0::2] + 1, edges[1::2]          # 1-based inclusive
    return ", ".join(f"{a}-{b}" if b > a else f"{a}" for a, b in zip(starts.tolist(),
                                                                      stops.tolist()))

