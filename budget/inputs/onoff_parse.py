"""The fast paths of :mod:`budget.inputs.onoff_table`: an on/off record parsed by pandas' C
parser straight to float64, in pieces read by one thread each.

Nothing here raises a located error: every function answers None whenever the general reading
of :mod:`budget.inputs.onoff_table` could differ in any way (numbers, messages), and the caller
then reads the file that way. The pieces are cut after a newline; each line is parsed by the
same code with the same options as in one pass, so the numbers are the same bit for bit (but
for the sign of a zero written ``-0`` in a column of integers, which the general reading infers
as integers: +0.0 there, −0.0 here; nothing computed depends on it).
pandas' tokenizer and float conversion run without the GIL, so the pieces are parsed side by
side on as many processors as the process may use.
"""

from __future__ import annotations

import io
import os
import warnings
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import DataError

_BOM = b"\xef\xbb\xbf"
_ON = {"on", "1", "1.0"}
_OFF = {"off", "0", "0.0"}
#: integers from 2**53 on are not all exact floats: such a column is read the general way
_EXACT = 2.0 ** 53
#: bytes of body below which a piece is not worth a thread of its own
_MIN_PART = 8 << 20
#: bytes read up front for the header (a header further on: the general way)
_HEAD = 1 << 20


def threads() -> int:
    """Processors this process may run on (at most 8): the number of pieces."""
    try:
        return max(1, min(len(os.sched_getaffinity(0)), 8))
    except AttributeError:  # pragma: no cover - platforms without sched_getaffinity
        return max(1, min(os.cpu_count() or 1, 8))


def pump_states(s: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Per row of a pump column: is the state valid (on/off, 1/0, any case), is it "on"."""
    if s.dtype.kind in "iuf":
        v = s.to_numpy(dtype=float)
        return (v == 0) | (v == 1), v == 1
    if isinstance(s.dtype, pd.CategoricalDtype):     # the reader's dtype: no factorising
        codes, uniques = s.cat.codes.to_numpy(), list(s.cat.categories)
    else:
        codes, uniques = pd.factorize(s, use_na_sentinel=False)
    labels = [str(u).strip().lower() for u in uniques]
    # a missing value (code −1) takes the extra last entry: invalid
    valid = np.array([lab in _ON or lab in _OFF for lab in labels] + [False], dtype=bool)
    is_on = np.array([lab in _ON for lab in labels] + [False], dtype=bool)
    return valid[codes], is_on[codes]


def no_initial_space(raw: bytes) -> bool:
    """True when no field of the file can begin with a space or tab, so that pandas'
    ``skipinitialspace`` (a quarter of the parsing time) changes nothing. Conservative: any
    space or tab after the header line, even in a comment, answers False; before it only lines
    starting with ``#`` may hold them."""
    start = body_start(raw)
    return start is not None and raw.find(b" ", start) < 0 and raw.find(b"\t", start) < 0


def body_start(raw: bytes) -> int | None:
    """Offset just past the header line (the first line that is neither blank nor a ``#``
    comment), or None when there is none or a line up to it begins with a space or tab."""
    pos = 3 if raw.startswith(_BOM) else 0
    while pos < len(raw):
        end = raw.find(b"\n", pos)
        end = len(raw) if end < 0 else end
        line = raw[pos:end]
        if line[:1] in (b" ", b"\t"):
            return None
        if line.strip() and not line.startswith(b"#"):      # the header line
            return min(end + 1, len(raw))
        pos = end + 1
    return None


@contextmanager
def _parser_warnings_raise():
    """pandas only warns (and drops the field) when the first data row of a piece is too
    long: made an error here. The filter is process-wide (``catch_warnings`` is not
    thread-safe), so it is set once around all the threads of a reading, never in them."""
    with warnings.catch_warnings():
        warnings.simplefilter("error", pd.errors.ParserWarning)
        yield


def read_piece(source, cols: list[str], first: bool) -> tuple | None:
    """``time_s``, ``reading`` (float64) and pump state (bool) of a binary file-like
    ``source``, parsed without ``skipinitialspace``; ``first``: it holds the header. None
    whenever the general reading could differ — a value that does not parse, a column of
    only 0s and 1s (it may have been the words True/False), a missing or
    non-finite value, a field-count problem, an integer too large to be exact, a pump state
    that is not valid, bytes that are not UTF-8. Call it inside :func:`_parser_warnings_raise`."""
    try:
        df = pd.read_csv(source, encoding="utf-8-sig", comment="#",
                         header=0 if first else None, names=cols, index_col=False,
                         skipinitialspace=False, keep_default_na=False, na_values=[],
                         low_memory=True,      # tokenizer buffers reused: 0.3 s less CPU
                         dtype={"pump": "category", "time_s": float, "reading": float})
    except (ValueError, UnicodeDecodeError, pd.errors.ParserWarning):
        return None
    out = []
    for c in ("time_s", "reading"):
        v = df[c].to_numpy()
        if v.dtype != np.float64:
            return None
        if len(v):     # min and max are NaN or ±inf if any value is: no temporary arrays
            lo, hi = float(v.min()), float(v.max())
            if not (-_EXACT < lo and hi < _EXACT):
                return None
            # a column (or piece) whose every field is True/False in any case is turned into
            # 1.0/0.0 by pandas even when asked for float; the general reading refuses such a
            # word. Only a column of 0s and 1s can hide it: read those the general way.
            if 0.0 <= lo and hi <= 1.0 and not 0.0 < v[0] < 1.0 \
                    and not ((v > 0.0) & (v < 1.0)).any():     # v[0]: no arrays, mostly
                return None
        out.append(v)
    ok, on = pump_states(df["pump"])
    if not ok.all():
        return None
    return out[0], out[1], on.astype(bool)


def read_bytes_plain(raw: bytes, cols: list[str]) -> tuple | None:
    """The whole record's bytes in one piece (a file too small to cut, or one that
    :func:`read_pieces` declined); None: read it the general way."""
    if not no_initial_space(raw):
        return None
    with _parser_warnings_raise():
        got = read_piece(io.BytesIO(raw), cols, True)
    return None if got is None or len(got[0]) == 0 else got


class _Piece(io.BufferedIOBase):
    """Bytes ``[lo, hi)`` of an open file as a read-only binary file (``os.pread``: the pieces
    share one descriptor). It notes whether a space, tab or quote occurs from ``check`` on."""

    def __init__(self, fd: int, lo: int, hi: int, check: int) -> None:
        super().__init__()
        self._fd, self._pos, self._hi, self._check = fd, lo, hi, check
        self.clean = True

    def readable(self) -> bool:
        return True

    def read(self, size: int | None = -1) -> bytes:
        want = self._hi - self._pos if size is None or size < 0 else min(size, self._hi - self._pos)
        out = os.pread(self._fd, want, self._pos) if want > 0 else b""
        if len(out) < want:                       # the file shrank while being read
            self.clean = False
        skip = max(0, self._check - self._pos)
        if self.clean and (out.find(b" ", skip) >= 0 or out.find(b"\t", skip) >= 0
                           or out.find(b'"', skip) >= 0):
            self.clean = False
        self._pos += len(out)
        return out

    read1 = read


def _cuts(fd: int, start: int, size: int, parts: int) -> list[int] | None:
    """``[0, c1, …, size]``: each cut just after a newline near an equal share of the body;
    None when a share holds no newline within 64 KiB or a cut would leave a byte-order mark
    at a piece's start (pandas drops one there, the one-pass reading does not)."""
    cuts = [0]
    for i in range(1, parts):
        at = start + (size - start) * i // parts
        window = os.pread(fd, 1 << 16, at)
        nl = window.find(b"\n")
        cut = at + nl + 1
        if nl < 0 or cut <= cuts[-1] or cut >= size or os.pread(fd, 3, cut) == _BOM:
            return None
        cuts.append(cut)
    return cuts + [size]


def read_pieces(path: Path, header) -> tuple | None:
    """The common case of a large record: the body cut into one piece per processor
    (:func:`threads`), each parsed by :func:`read_piece` in its own thread, the arrays joined
    in order. ``header(text)`` returns the column names of the header's text or raises.
    None — read the whole bytes instead — for a file smaller than two pieces, a header beyond
    the first MiB or not accepted, any space, tab or quote after the header (a quoted field
    may hold a newline), or any piece for which :func:`read_piece` answers None."""
    with open(path, "rb") as f:
        fd = f.fileno()
        size = os.fstat(fd).st_size
        head = os.pread(fd, _HEAD, 0)
        start = body_start(head)
        if start is None or start >= len(head) or b"\x00" in head[:65536]:
            return None
        parts = min(threads(), (size - start) // _MIN_PART)
        if parts < 2:
            return None
        try:
            cols = header(head[:start].decode("utf-8-sig"))
        except (DataError, UnicodeDecodeError):   # the whole-bytes reading says where
            return None
        cuts = _cuts(fd, start, size, parts)
        if cuts is None:
            return None
        pieces = [_Piece(fd, a, b, start) for a, b in zip(cuts[:-1], cuts[1:])]
        with _parser_warnings_raise(), ThreadPoolExecutor(len(pieces) - 1) as pool:
            rest = [pool.submit(read_piece, p, cols, False) for p in pieces[1:]]
            got = [read_piece(pieces[0], cols, True)] + [r.result() for r in rest]
    if any(g is None for g in got) or not all(p.clean for p in pieces):
        return None
    return tuple(np.concatenate([g[k] for g in got]) for k in range(3))
