"""Writing records into the book's tables (inside a transaction the store has opened).

The stored bytes are the record file's bytes as a zlib stream (:func:`compress_body`: made by
ISA-L's deflate at level 1, which is about 3.5 times faster than zlib's level 1 and a few per
cent smaller; any zlib, the standard library's included, reads it back); the indexed columns
and the measurands, calibrations and terms tables are filled from the
:class:`~budget.logbook.extract.PreparedRecord`.
"""

from __future__ import annotations

import sqlite3
import zlib
from collections.abc import Sequence
from pathlib import Path

from isal import isal_zlib

from ..errors import DataError
from .extract import PreparedRecord

__all__ = ["compress_body", "add_rows", "refuse_duplicates", "refuse_repeated_runs",
           "insert_details"]


def reference_deflate(raw: bytes) -> bytes:
    """The former compressor: the standard library's zlib at level 1 (for benchmarks)."""
    return zlib.compress(raw, 1)


def _isal_deflate(raw: bytes) -> bytes:
    return isal_zlib.compress(raw, 1)


_deflate = _isal_deflate


def compress_body(raw: bytes) -> bytes:
    """The bytes a record is stored as: a zlib stream (``zlib.decompress`` gives ``raw``)."""
    return _deflate(raw)


def add_rows(con: sqlite3.Connection, records: Sequence[PreparedRecord],
             added_utc: str) -> list[int]:
    """Insert records in the open transaction; a duplicate (by digest) is refused.

    One statement per table for all the records (``executemany``); the ids are the ones
    SQLite would give one by one (the largest id so far plus one: the table has no
    AUTOINCREMENT), assigned here so that the measurands and other rows can name them.
    """
    refuse_duplicates(con, records)
    refuse_repeated_runs(con, records)
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


def _run_key(spec_sha256: str, manifest_sha256: str, date_start: str | None
             ) -> tuple[str, str, str | None] | None:
    return (spec_sha256, manifest_sha256, date_start) if spec_sha256 else None


def refuse_repeated_runs(con: sqlite3.Connection, records: Sequence[PreparedRecord]) -> None:
    """A record of a measurement already in the book (or given twice) raises DataError.

    Two records are of the same measurement when they come from the same spec (its SHA-256
    covers every typed-in value), the same data files (the input manifest's digest) and the
    same measurement date (``[report] measurement_date``, part of the spec; compared as well
    so that records whose date was set apart from the spec are not merged): re-running such a
    spec gives another
    record (another seed, run time, software version) but no new evidence, and a trend that
    counted it twice would give the run twice its weight and one more degree of freedom.
    A record without a spec digest is not judged.
    """
    keys = {k for k in (_run_key(r.spec_sha256, r.manifest_sha256, r.date_start)
                        for r in records) if k is not None}
    if not keys:
        return
    specs = sorted({k[0] for k in keys})
    stored: dict[tuple, int] = {}
    for i in range(0, len(specs), 500):                # SQLite allows 999 parameters
        chunk = specs[i:i + 500]
        for rid, spec, manifest, day in con.execute(
                "SELECT id, spec_sha256, manifest_sha256, date_start FROM records WHERE "
                f"spec_sha256 IN ({','.join('?' * len(chunk))})", chunk):
            stored.setdefault((spec, manifest, day), rid)
    seen: dict[tuple, str] = {}
    for r in records:
        k = _run_key(r.spec_sha256, r.manifest_sha256, r.date_start)
        if k is None:
            continue
        if k in stored:
            raise DataError(f"the same measurement as #{stored[k]} (same spec, data files and "
                            "measurement date; only the run differs, e.g. its seed): a run is "
                            "kept once; nothing was added", file=r.file, field="run.spec_sha256")
        if k in seen:
            raise DataError(f"the same measurement as {seen[k]} (same spec, data files and "
                            "measurement date): a run is kept once; nothing was added",
                            file=r.file, field="run.spec_sha256")
        seen[k] = r.file


def insert_details(con: sqlite3.Connection, ids: Sequence[int],
                    records: Sequence[PreparedRecord]) -> None:
    """The calibrations and terms of records (``ids[i]`` is the id of ``records[i]``)."""
    con.executemany("INSERT INTO calibrations VALUES (?,?,?,?,?,?,?)",
                    [(rid, c.input, c.kind, c.module, c.identifier, c.path, c.calibration_date)
                     for rid, r in zip(ids, records) for c in r.calibrations])
    con.executemany("INSERT INTO terms VALUES (?,?,?,?,?)",
                    [(rid, t.measurand, t.name, t.contribution, t.key)
                     for rid, r in zip(ids, records) for t in r.terms])
