"""The logbook: one SQLite file holding every result record whole, with indexed columns.

Where the book is
-----------------
``--book FILE``, else the environment variable ``BUDGET_LOGBOOK``, else a per-user data
folder: ``$XDG_DATA_HOME/qcs-budget/logbook.sqlite`` (``~/.local/share/...`` when XDG_DATA_HOME
is unset; ``%APPDATA%\\qcs-budget\\logbook.sqlite`` on Windows). See :func:`resolve_book`.

Guarantees
----------
* Every change is one transaction (``BEGIN IMMEDIATE`` … ``COMMIT``) in SQLite's rollback
  journal with ``synchronous = FULL``: a process killed during ``add`` leaves the book as it was
  (SQLite rolls the hot journal back on the next open); an ``add`` of several files adds all
  or none.
* A record already in the book (same SHA-256 of its bytes, or of its canonical JSON) is
  refused; so is a record whose stated digest does not match (see :mod:`.extract`).
* Reading a record back (``show``, ``export``) re-computes its SHA-256 and refuses a stored
  record that no longer matches: the book was changed outside the tool.
* A file that is not a logbook (not SQLite, or another application id), a book of a newer
  schema, a read-only book (for writing) and a book locked by another writer (after waiting
  ``wait_s`` seconds) are refused with a :class:`~budget.errors.DataError`; nothing changes.
"""

from __future__ import annotations

import hashlib
import os
import sqlite3
import stat
import zlib
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..errors import DataError, UsageError
from . import schema
from .extract import PreparedRecord, prepare
from .rows import add_rows, compress_body, insert_details

__all__ = ["Logbook", "Entry", "StoredRecord", "SeriesRow", "Series", "resolve_book",
           "default_book_path", "DEFAULT_WAIT_S", "ENV_BOOK", "compress_body"]

ENV_BOOK = "BUDGET_LOGBOOK"
DEFAULT_WAIT_S = 10.0      # how long a locked book is waited for before refusing
_SQLITE_MAGIC = b"SQLite format 3\x00"


def default_book_path(env: dict[str, str] | None = None) -> Path:
    """The per-user book: XDG data folder (POSIX) or %APPDATA% (Windows)."""
    env = os.environ if env is None else env
    if os.name == "nt" and env.get("APPDATA"):
        base = Path(env["APPDATA"])
    else:
        base = Path(env.get("XDG_DATA_HOME") or Path.home() / ".local" / "share")
    return base / "qcs-budget" / "logbook.sqlite"


def resolve_book(book: str | None, env: dict[str, str] | None = None) -> tuple[Path, bool]:
    """(path, is_default): ``book``, else $BUDGET_LOGBOOK, else :func:`default_book_path`."""
    env = os.environ if env is None else env
    if book:
        return Path(book), False
    if env.get(ENV_BOOK):
        return Path(env[ENV_BOOK]), False
    return default_book_path(env), True


@dataclass(frozen=True)
class Entry:
    """One record in the book, as ``list`` shows it."""

    id: int
    sha256: str
    title: str
    chain: str
    date_start: str | None
    date_end: str | None
    pump: str
    frequency_Hz: float | None
    file_name: str
    added_utc: str
    measurands: tuple[dict[str, Any], ...]

    def to_dict(self) -> dict[str, Any]:
        d = dict(self.__dict__)
        d["measurands"] = [dict(m) for m in self.measurands]
        return d


@dataclass(frozen=True)
class StoredRecord:
    entry: Entry
    raw: bytes                          # the record's bytes, digest checked
    calibrations: tuple[dict[str, Any], ...]
    spec_sha256: str
    manifest_sha256: str


@dataclass(frozen=True)
class SeriesRow:
    id: int
    date_start: str
    date_end: str
    chain: str
    title: str
    unit: str
    value: float
    standard_uncertainty: float
    expanded_uncertainty: float
    coverage_factor: float


@dataclass(frozen=True)
class Series:
    """What a trend needs of one measurand: the points, the shared terms, the calibrations."""

    measurand: str
    rows: tuple[SeriesRow, ...]
    undated: int                                   # records with the measurand but no date
    terms: tuple[tuple[int, float, str], ...]      # (record id, signed c·u, key)
    calibrations: tuple[tuple[int, str, str, str, str, str, str], ...]
    # (record id, input, kind, module, identifier, path, calibration date)
    #: terms independent by their identity (no key), by name: (record id, signed c·u, name)
    unkeyed: tuple[tuple[int, float, str], ...] = ()


def _locked(exc: sqlite3.OperationalError) -> bool:
    text = str(exc).lower()
    return "locked" in text or "busy" in text


class Logbook:
    """An open book. Use :meth:`open` (as a context manager)."""

    def __init__(self, path: Path, con: sqlite3.Connection, writable: bool, wait_s: float):
        self.path, self._con, self.writable, self.wait_s = path, con, writable, wait_s

    # ------------------------------------------------------------------ opening
    @classmethod
    def open(cls, path: str | Path, *, write: bool = False, create: bool = False,
             wait_s: float = DEFAULT_WAIT_S) -> Logbook:
        """Open (or with ``create`` make) the book at ``path``.

        Parameters
        ----------
        path : str or Path
        write : bool
            Open for changes; a read-only file is refused. Default False.
        create : bool
            Make a new book when none exists (its folder must exist). Default False.
        wait_s : float
            Seconds to wait for another process's lock before refusing. Default 10.

        Raises
        ------
        DataError
            No book there, not a logbook, a newer schema, read-only, locked, damaged.
        """
        p, name = Path(path), str(path)
        if p.exists() and not p.is_file():
            raise DataError("is a folder, not a logbook file", file=name, field="book")
        if not p.exists():
            if not create:
                raise DataError("no logbook here (add a record first, or give --book)",
                                file=name, field="book")
            if not p.parent.is_dir():
                raise DataError("the folder of the book does not exist", file=name,
                                field="book")
        else:
            _check_header(p, name)
            if write and _read_only(p):
                raise DataError("the book is read-only; nothing was changed", file=name,
                                field="book")
        read_only = p.exists() and not write and _read_only(p)
        try:
            if read_only:
                con = sqlite3.connect(f"{p.resolve().as_uri()}?mode=ro", uri=True,
                                      timeout=wait_s, isolation_level=None)
            else:
                con = sqlite3.connect(str(p), timeout=wait_s, isolation_level=None)
        except sqlite3.Error as exc:
            raise DataError(f"cannot be opened: {exc}", file=name, field="book") from None
        book = cls(p, con, write, wait_s)
        try:
            try:
                con.execute("PRAGMA synchronous = FULL")
            except sqlite3.Error as exc:
                raise book._error(exc) from None
            book._check_schema(create, read_only)
        except BaseException:
            con.close()
            raise
        return book

    def _error(self, exc: sqlite3.Error) -> DataError:
        name = str(self.path)
        if isinstance(exc, sqlite3.OperationalError) and _locked(exc):
            return DataError(f"the book is locked by another process (waited {self.wait_s:g} s);"
                             " nothing was changed — try again when it has finished",
                             file=name, field="book")
        text = str(exc).lower()
        if "readonly" in text or "read-only" in text:
            return DataError("the book is read-only; nothing was changed", file=name,
                             field="book")
        if "not a database" in text or "malformed" in text:
            return DataError(f"not a logbook, or damaged ({exc})", file=name, field="book")
        return DataError(f"logbook error: {exc}", file=name, field="book")

    def _check_schema(self, create: bool, read_only: bool) -> None:
        name = str(self.path)
        try:
            app = self._con.execute("PRAGMA application_id").fetchone()[0]
            version = self._con.execute("PRAGMA user_version").fetchone()[0]
            tables = self._con.execute(
                "SELECT count(*) FROM sqlite_master").fetchone()[0]
        except sqlite3.Error as exc:
            raise self._error(exc) from None
        if app == 0 and version == 0 and tables == 0:
            if not create:
                raise DataError("an empty database, not a logbook", file=name, field="book")
            self._transaction(schema.create)
            return
        if app != schema.APPLICATION_ID:
            raise DataError("not a qcs-budget logbook (another SQLite database)", file=name,
                            field="book")
        if version > schema.SCHEMA_VERSION:
            raise DataError(f"written by a newer version (logbook schema {version}); this "
                            f"version reads up to {schema.SCHEMA_VERSION}", file=name,
                            field="book")
        if version < 1:
            raise DataError(f"unknown logbook schema {version}", file=name, field="book")
        if version < schema.SCHEMA_VERSION:
            if read_only and version >= schema.READABLE_FROM:
                return                      # only an index is missing: read as it is
            if read_only:
                raise DataError(f"logbook schema {version} needs migrating to "
                                f"{schema.SCHEMA_VERSION}, but the book is read-only",
                                file=name, field="book")
            self._transaction(lambda con: schema.migrate(con, version, self._refill))

    def _transaction(self, work) -> Any:
        try:
            self._con.execute("BEGIN IMMEDIATE")
        except sqlite3.Error as exc:
            raise self._error(exc) from None
        try:
            out = work(self._con)
            self._con.execute("COMMIT")
            return out
        except sqlite3.Error as exc:
            self._rollback()
            raise self._error(exc) from None
        except BaseException:
            self._rollback()
            raise

    def _rollback(self) -> None:
        try:
            self._con.execute("ROLLBACK")
        except sqlite3.Error:
            pass

    def close(self) -> None:
        self._con.close()

    def __enter__(self) -> Logbook:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # ------------------------------------------------------------------ writing
    def add(self, records: Sequence[PreparedRecord], *, added_utc: str) -> list[int]:
        """Add prepared records in one transaction; all or none. Returns their ids.

        Raises
        ------
        DataError
            A record already in the book or given twice (same digest), read-only, locked.
        """
        if not self.writable:
            raise UsageError("the book was opened for reading", field="book")
        return self._transaction(lambda con: add_rows(con, records, added_utc))

    def add_pending(self, records: Sequence[PreparedRecord], *, added_utc: str) -> list[int]:
        """Like :meth:`add`, but the transaction stays open (the book stays locked for
        writing): finish it with :meth:`commit_pending` or :meth:`rollback_pending`. For a
        change that must go together with files (``run --logbook``, budget.staging)."""
        if not self.writable:
            raise UsageError("the book was opened for reading", field="book")
        try:
            self._con.execute("BEGIN IMMEDIATE")
        except sqlite3.Error as exc:
            raise self._error(exc) from None
        try:
            return add_rows(self._con, records, added_utc)
        except sqlite3.Error as exc:
            self._rollback()
            raise self._error(exc) from None
        except BaseException:
            self._rollback()
            raise

    def commit_pending(self) -> None:
        """COMMIT the transaction :meth:`add_pending` left open (rolled back if that fails)."""
        try:
            self._con.execute("COMMIT")
        except sqlite3.Error as exc:
            self._rollback()
            raise self._error(exc) from None

    def rollback_pending(self) -> None:
        """Undo the transaction :meth:`add_pending` left open (never raises)."""
        self._rollback()

    def _refill(self, con: sqlite3.Connection) -> None:
        """Recompute the columns and tables of schema 2 from the stored records."""
        for rid, body, fname in con.execute(
                "SELECT id, body, file_name FROM records").fetchall():
            p = prepare(zlib.decompress(body), fname, check_stated=False)
            con.execute("UPDATE records SET canonical_sha256 = ? WHERE id = ?",
                        (p.canonical_sha256, rid))
            insert_details(con, [rid], [p])

    # ------------------------------------------------------------------ reading
    def count(self) -> int:
        return self._query("SELECT count(*) FROM records")[0][0]

    def _query(self, sql: str, params: Sequence[Any] = ()) -> list[tuple]:
        try:
            return self._con.execute(sql, tuple(params)).fetchall()
        except sqlite3.Error as exc:
            raise self._error(exc) from None

    def entries(self, *, since: str | None = None, chain: str | None = None,
                ids: Sequence[int] | None = None) -> list[Entry]:
        """Records ordered by measurement date (undated last), optionally filtered.

        ``since`` is an ISO date (a record counts when its measurement ends on or after it);
        ``chain`` the exact chain name.
        """
        where, params = [], []
        if since:
            where.append("coalesce(date_end, date_start) >= ?")
            params.append(since)
        if chain:
            where.append("chain = ?")
            params.append(chain)
        if ids is not None:
            where.append(f"id IN ({','.join('?' * len(ids))})")
            params.extend(ids)
        sql = ("SELECT id, sha256, title, chain, date_start, date_end, pump, frequency_hz, "
               "file_name, added_utc FROM records"
               + (" WHERE " + " AND ".join(where) if where else "")
               + " ORDER BY date_start IS NULL, date_start, id")
        rows = self._query(sql, params)
        ms: dict[int, list[dict[str, Any]]] = {}
        msql = "SELECT record_id, name, unit, value, u, big_u, k FROM measurands"
        if ids is not None:
            msql += f" WHERE record_id IN ({','.join('?' * len(ids))})"
        for rid, nm, unit, v, u, big_u, k in self._query(msql, ids or ()):
            ms.setdefault(rid, []).append({"name": nm, "unit": unit, "value": v,
                                           "standard_uncertainty": u,
                                           "expanded_uncertainty": big_u,
                                           "coverage_factor": k})
        return [Entry(*r, measurands=tuple(ms.get(r[0], ()))) for r in rows]

    def record(self, rid: int) -> StoredRecord:
        """One record, its bytes checked against the stored digest.

        Raises
        ------
        DataError
            No such record, or the stored bytes do not match their digest.
        """
        rows = self._query("SELECT body, sha256, spec_sha256, manifest_sha256 FROM records "
                           "WHERE id = ?", (rid,))
        if not rows:
            raise DataError(f"no record #{rid} in the book", file=str(self.path), field="ID")
        body, sha, spec_sha, man_sha = rows[0]
        raw = self._checked(rid, body, sha)
        cal = self._query("SELECT input, kind, module, identifier, path, calibration_date "
                          "FROM calibrations WHERE record_id = ? ORDER BY input", (rid,))
        keys = ("input", "kind", "module", "identifier", "path", "calibration_date")
        return StoredRecord(entry=self.entries(ids=[rid])[0], raw=raw,
                            calibrations=tuple(dict(zip(keys, c)) for c in cal),
                            spec_sha256=spec_sha, manifest_sha256=man_sha)

    def _checked(self, rid: int, body: bytes, sha: str) -> bytes:
        try:
            raw = zlib.decompress(body)
        except zlib.error:
            raw = b""
        if hashlib.sha256(raw).hexdigest() != sha:
            raise DataError(f"record #{rid} in the book does not match its SHA-256 (the book "
                            "was changed outside the tool)", file=str(self.path),
                            field=f"records[{rid}].sha256")
        return raw

    def all_records(self) -> list[tuple[int, str, bytes]]:
        """(id, sha256, bytes) of every record, each checked against its digest."""
        return [(rid, sha, self._checked(rid, body, sha)) for rid, sha, body in
                self._query("SELECT id, sha256, body FROM records ORDER BY id")]

    def measurand_counts(self) -> list[tuple[str, int]]:
        return [(n, c) for n, c in self._query(
            "SELECT name, count(*) FROM measurands GROUP BY name ORDER BY min(record_id), name")]

    def series(self, measurand: str) -> Series:
        """Everything a trend of ``measurand`` needs, in one read (a former name of the
        chain deviation matches too: :func:`budget.measurands.match_name`)."""
        from ..measurands import DEVIATION_DISPLAY_UNITS, deviation_aliases
        alias, units = deviation_aliases(measurand), DEVIATION_DISPLAY_UNITS
        same = (f"(m.name = ? OR (m.name IN ({','.join('?' * len(alias))}) AND m.unit IN "
                f"({','.join('?' * len(units))})))") if alias else "m.name = ?"
        args = (measurand, *alias, *units) if alias else (measurand,)
        rows = self._query(
            "SELECT r.id, r.date_start, coalesce(r.date_end, r.date_start), r.chain, r.title, "
            "m.unit, m.value, m.u, m.big_u, m.k FROM measurands m JOIN records r "
            f"ON r.id = m.record_id WHERE {same} ORDER BY r.date_start, r.id", args)
        dated = tuple(SeriesRow(*r) for r in rows if r[1] is not None)
        terms = tuple(self._query("SELECT t.record_id, t.contribution, t.key FROM terms t "
                                  "JOIN measurands m ON m.record_id = t.record_id AND "
                                  f"m.name = t.measurand WHERE {same} AND t.key IS NOT NULL",
                                  args))
        cals = tuple(self._query("SELECT record_id, input, kind, module, identifier, path, "
                                 "calibration_date FROM calibrations"))
        unkeyed = tuple(self._query("SELECT record_id, contribution, name FROM terms "
                                    "WHERE measurand = ? AND key IS NULL", (measurand,)))
        return Series(measurand, dated, len(rows) - len(dated), terms, cals, unkeyed)


def _read_only(p: Path) -> bool:
    # the mode bits as well as access(): root may write any file, but a book made read-only
    # (chmod a-w) is meant to stay unchanged
    mode = p.stat().st_mode
    return not (mode & (stat.S_IWUSR | stat.S_IWGRP | stat.S_IWOTH)) or not os.access(p, os.W_OK)


def _check_header(p: Path, name: str) -> None:
    try:
        with p.open("rb") as fh:
            head = fh.read(len(_SQLITE_MAGIC))
    except OSError as exc:
        raise DataError(f"cannot be read: {exc.strerror}", file=name, field="book") from None
    if head != _SQLITE_MAGIC:
        raise DataError("not a logbook (not an SQLite database file)", file=name, field="book")
