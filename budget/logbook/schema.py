"""The logbook's SQLite schema, its version and the migrations between versions.

A book is recognised by ``PRAGMA application_id`` (:data:`APPLICATION_ID`) and versioned by
``PRAGMA user_version``: a SQLite file with another application id is not a logbook; a book of a
newer version than :data:`SCHEMA_VERSION` is refused (this version cannot know its meaning); an
older one is migrated step by step, each step inside the caller's transaction, so a migration
interrupted half-way leaves the old book.

Version history
---------------
1. ``records`` (whole record, compressed, with its SHA-256 and indexed columns) and
   ``measurands`` (one row per output of each record).
2. adds ``records.canonical_sha256`` (the same record re-indented counts as a duplicate),
   ``calibrations`` (the calibrations each record used) and ``terms`` (each term's signed
   contribution and source identity, for the covariance of the trend). The migration fills them
   from the stored records.
3. adds the index ``records_run`` on (spec digest, manifest digest, measurement date): a record
   of a measurement already in the book is refused (:func:`budget.logbook.rows.
   refuse_repeated_runs`). Nothing else changes, so a read-only book of version 2 is still read
   as it is.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Callable

__all__ = ["APPLICATION_ID", "SCHEMA_VERSION", "READABLE_FROM", "DDL_V1", "DDL", "create", "migrate"]

#: "QCSL" in ASCII: marks a SQLite file as a qcs-budget logbook
APPLICATION_ID = 0x5143534C
SCHEMA_VERSION = 3
#: the oldest version read without migrating (a read-only book of it can still be listed)
READABLE_FROM = 2

DDL_V1 = """
CREATE TABLE records (
    id INTEGER PRIMARY KEY,
    sha256 TEXT NOT NULL UNIQUE,
    body BLOB NOT NULL,              -- zlib-compressed record bytes, exactly as added
    size INTEGER NOT NULL,           -- length of the uncompressed bytes
    file_name TEXT NOT NULL,
    title TEXT NOT NULL,
    spec_sha256 TEXT NOT NULL,
    manifest_sha256 TEXT NOT NULL,
    chain TEXT NOT NULL,
    date_start TEXT,                 -- ISO date or date-time; NULL when the record has none
    date_end TEXT,
    pump TEXT NOT NULL,
    operating_point TEXT NOT NULL,
    frequency_hz REAL,
    added_utc TEXT NOT NULL
);
CREATE INDEX records_date ON records(date_start);
CREATE INDEX records_chain ON records(chain, date_start);
CREATE TABLE measurands (
    record_id INTEGER NOT NULL REFERENCES records(id),
    name TEXT NOT NULL,
    unit TEXT NOT NULL,
    value REAL NOT NULL,
    u REAL NOT NULL,
    big_u REAL NOT NULL,
    k REAL NOT NULL,
    PRIMARY KEY (record_id, name)
) WITHOUT ROWID;
CREATE INDEX measurands_name ON measurands(name, record_id);
"""

_DDL_2 = """
ALTER TABLE records ADD COLUMN canonical_sha256 TEXT;
CREATE TABLE calibrations (
    record_id INTEGER NOT NULL REFERENCES records(id),
    input TEXT NOT NULL,
    kind TEXT NOT NULL,              -- "file" or "typed in"
    module TEXT NOT NULL,
    identifier TEXT NOT NULL,        -- file SHA-256 or typed-in source text
    path TEXT NOT NULL,
    calibration_date TEXT NOT NULL
);
CREATE INDEX calibrations_record ON calibrations(record_id);
CREATE TABLE terms (
    record_id INTEGER NOT NULL REFERENCES records(id),
    measurand TEXT NOT NULL,
    name TEXT NOT NULL,
    contribution REAL NOT NULL,      -- signed c·u in the measurand's unit
    key TEXT                         -- source identity (shared between records), NULL if none
);
CREATE INDEX terms_measurand ON terms(measurand, record_id);
"""

_UNIQUE_2 = "CREATE UNIQUE INDEX records_canonical ON records(canonical_sha256);"

_DDL_3 = "CREATE INDEX records_run ON records(spec_sha256, manifest_sha256, date_start);"

DDL = DDL_V1 + _DDL_2 + _UNIQUE_2 + _DDL_3


def create(con: sqlite3.Connection) -> None:
    """Create the current schema in an empty database (inside the caller's transaction)."""
    # statement by statement: executescript() would COMMIT the caller's transaction
    for stmt in _statements(DDL):
        con.execute(stmt)
    con.execute(f"PRAGMA application_id = {APPLICATION_ID}")
    con.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")


def _statements(script: str) -> list[str]:
    lines = [ln.split("--", 1)[0] for ln in script.splitlines()]
    return [s.strip() for s in "\n".join(lines).split(";") if s.strip()]


def _migrate_1_to_2(con: sqlite3.Connection, refill: Callable[[sqlite3.Connection], None]) -> None:
    for stmt in _statements(_DDL_2):
        con.execute(stmt)
    refill(con)
    con.execute(_UNIQUE_2)


def _migrate_2_to_3(con: sqlite3.Connection, refill: Callable[[sqlite3.Connection], None]) -> None:
    con.execute(_DDL_3)


_STEPS = {1: _migrate_1_to_2, 2: _migrate_2_to_3}


def migrate(con: sqlite3.Connection, version: int,
            refill: Callable[[sqlite3.Connection], None]) -> int:
    """Bring a book of ``version`` to :data:`SCHEMA_VERSION` inside the caller's transaction.

    ``refill(con)`` recomputes the columns and tables a step adds from the stored records
    (the store provides it: only it knows how to read a record). Returns the old version.
    """
    v = version
    while v < SCHEMA_VERSION:
        _STEPS[v](con, refill)
        v += 1
    con.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")
    return version
