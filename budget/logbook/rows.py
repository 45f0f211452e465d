"""Writing records into the book's tables (inside a transaction the store has opened).

The stored bytes are the record file's bytes, zlib-compressed (:func:`compress_body`); the
indexed columns and the measurands, calibrations and terms tables are filled from the
:class:`~budget.logbook.extract.PreparedRecord`.
"""

from __future__ import annotations

import sqlite3
import zlib
from collections.abc import Sequence
from pathlib import Path

from ..errors import DataError
from .extract import PreparedRecord

__all__ = ["compress_body", "add_rows", "refuse_duplicates", "insert_details"]

_ZLEVEL = 1                # zlib level of the stored bytes: 3× faster than 6, 8 % larger


def compress_body(raw: bytes) -> bytes:
    """The bytes a record is stored as (zlib at the book's level)."""
    return zlib.compress(raw, _ZLEVEL)


def add_rows(con: sqlite3.Connection, records: Sequence[PreparedRecord],
             added_utc: str) -> list[int]:
    """Insert records in the open transaction; a duplicate (by digest) is refused.

    One statement per table for all the records (``executemany``); the ids are the ones
    SQLite would give one by one (the largest id so far plus one: the table has no
    AUTOINCREMENT), assigned here so that the measurands and other rows can name them.
    """
    refuse_duplicates(con, records)
    start = con.execute("SELECT coalesce(max(id), 0) + 1 FROM records").fetchone()[0]
    ids = list(range(start, start + len(records)))
    con.executemany(
        "INSERT INTO records (id, sha256, canonical_sha256, body, size, file_name, title, "
        "spec_sha256, manifest_sha256, chain, date_start, date_end, pump, operating_point, "
        "frequency_hz, added_utc) VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
        ((rid, r.sha256, r.canonical_sha256, r.body or compress_body(r.raw),
          r.size or len(r.raw), Path(r.file).name, r.title, r.spec_sha256, r.manifest_sha256,
          r.chain, r.date_start, r.date_end, r.pump, r.operating_point, r.frequency_Hz,
          added_utc) for rid, r in zip(ids, records)))
    con.executemany("INSERT INTO measurands VALUES (?,?,?,?,?,?,?)",
                    [(rid, m.name, m.unit, m.value, m.standard_uncertainty,
                      m.expanded_uncertainty, m.coverage_factor)
                     for rid, r in zip(ids, records) for m in r.measurands])
    insert_details(con, ids, records)
    return ids


def refuse_duplicates(con: sqlite3.Connection, records: Sequence[PreparedRecord]) -> None:
    """The first record (in order) already in the book or given twice raises DataError."""
    found: dict[str, dict[str, int]] = {}
    for col in ("sha256", "canonical_sha256"):
        digests = [getattr(r, col) for r in records]
        found[col] = {}
        for i in range(0, len(digests), 500):          # SQLite allows 999 parameters
            chunk = digests[i:i + 500]
            found[col].update(con.execute(
                f"SELECT {col}, id FROM records WHERE {col} IN "
                f"({','.join('?' * len(chunk))})", chunk).fetchall())
    seen: dict[str, str] = {}
    for r in records:
        for col, digest in (("sha256", r.sha256), ("canonical_sha256", r.canonical_sha256)):
            if digest in found[col]:
                raise DataError(f"already in the book as #{found[col][digest]} (same "
                                f"{'digest' if col == 'sha256' else 'content'}); "
                                "nothing was added", file=r.file, field="sha256")
            if digest in seen:
                raise DataError(f"the same record as {seen[digest]}; nothing was "
                                "added", file=r.file, field="sha256")
            seen[digest] = r.file


def insert_details(con: sqlite3.Connection, ids: Sequence[int],
                    records: Sequence[PreparedRecord]) -> None:
    """The calibrations and terms of records (``ids[i]`` is the id of ``records[i]``)."""
    con.executemany("INSERT INTO calibrations VALUES (?,?,?,?,?,?,?)",
                    [(rid, c.input, c.kind, c.module, c.identifier, c.path, c.calibration_date)
                     for rid, r in zip(ids, records) for c in r.calibrations])
    con.executemany("INSERT INTO terms VALUES (?,?,?,?,?)",
                    [(rid, t.measurand, t.name, t.contribution, t.key)
                     for rid, r in zip(ids, records) for t in r.terms])
