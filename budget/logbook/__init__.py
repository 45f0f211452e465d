"""The laboratory's logbook: every result record kept in one SQLite file, trends over months
and the control rules that catch a chain whose reference moved.

* :mod:`.store` — the book (schema, transactions, digests, locking): :class:`Logbook`;
* :mod:`.extract` — what is stored of a record (digests, indexed columns, calibrations used);
* :mod:`.schema` — the schema version and its migrations;
* :mod:`.gls` — weighted means of runs that share terms (generalised χ²);
* :mod:`.trend` — the trend, the run-against-other-chain rule and the step test;
* :mod:`.ops` — the operations behind ``budget logbook add|list|show|trend|export``.
"""

from .extract import PreparedRecord, prepare
from .ops import add_files, add_prepared, export_book, read_record_file, stage_add
from .store import DEFAULT_WAIT_S, ENV_BOOK, Logbook, default_book_path, resolve_book
from .trend import Trend, compute_trend

__all__ = ["Logbook", "PreparedRecord", "prepare", "add_files", "add_prepared", "stage_add", "export_book",
           "read_record_file", "compute_trend", "Trend", "resolve_book", "default_book_path",
           "DEFAULT_WAIT_S", "ENV_BOOK"]
