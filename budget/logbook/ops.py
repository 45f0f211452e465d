"""The operations behind ``budget logbook add|list|show|trend|export`` (the CLI calls these).

Every check happens before the book is touched: ``add`` reads and checks all files first, then
adds them in one transaction; ``export`` writes into a temporary folder beside DIR and renames
it into place, so an interrupted export leaves no half folder.
"""

from __future__ import annotations

import contextlib
import hashlib
import multiprocessing
import os
import shutil
import signal
import tempfile
import threading
import time
from collections.abc import Sequence
from concurrent.futures import ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from dataclasses import replace
from datetime import UTC, datetime
from pathlib import Path

from ..errors import UsageError
from ..outputs import new_folder_mode, temp_prefix
from ..record import read_record_bytes
from .extract import PreparedRecord, StatedDigests, prepare
from .rows import compress_body
from .store import DEFAULT_WAIT_S, Logbook

__all__ = ["read_record_file", "prepare_files", "add_files", "add_prepared", "stage_add",
           "export_book", "export_name"]


def read_record_file(path: str | Path, stated: StatedDigests | None = None) -> PreparedRecord:
    """Read and check one record file (see :func:`budget.logbook.extract.prepare`;
    ``stated``: the digests stated beside the files, shared by the files of one add)."""
    return prepare(read_record_bytes(path), str(path), stated=stated)


#: from this many files on, ``add_files`` reads, checks and compresses them in worker processes
PARALLEL_FROM = 256


#: in a worker process: the stated digests of its pool's add (each folder read once per worker)
_WORKER_STATED = StatedDigests()


def _worker_start(parent: int) -> None:
    """In each worker: default signal handling (the command's own handlers are the parent's
    business; an interrupt reaches the parent, which stops the pool), and leave as soon as the
    parent is gone, so that a killed ``add`` leaves no process behind."""
    global _WORKER_STATED
    _WORKER_STATED = StatedDigests()        # a new pool: the folders are read anew
    for name in ("SIGTERM", "SIGHUP"):
        if hasattr(signal, name):
            signal.signal(getattr(signal, name), signal.SIG_DFL)
    signal.signal(signal.SIGINT, signal.SIG_IGN)

    def watch() -> None:
        while os.getppid() == parent:
            time.sleep(0.2)
        os._exit(1)
    threading.Thread(target=watch, daemon=True).start()


def _prepare_compressed(path: str) -> PreparedRecord | None:
    """A worker's share: the checked record with its stored bytes (and not the file's bytes,
    which the book does not need again), or None when the file is refused or anything else
    goes wrong (the caller then reads it again itself, so it fails exactly as the serial path
    does)."""
    try:
        r = read_record_file(path, _WORKER_STATED)
        return replace(r, raw=b"", size=len(r.raw), body=compress_body(r.raw))
    except Exception:       # noqa: BLE001 -- the caller repeats the read and raises
        return None


def _idle_cpus() -> int:
    """CPUs not busy with other work (CPU count less the 1-minute load average), at most 4:
    on a machine already running other jobs, worker processes only compete with them and the
    add is slower than in one process (benchmarks/README.md, Logbook)."""
    try:
        load = os.getloadavg()[0]
    except (AttributeError, OSError):      # pragma: no cover - no load average (Windows)
        load = 0.0
    return max(1, min(4, int((os.cpu_count() or 1) - load + 0.5)))


def prepare_files(files: Sequence[str | Path], workers: int | None = None
                  ) -> list[PreparedRecord]:
    """Read and check every file, in order; the first refused file raises its error.

    The serial path (``workers=1``) is the reference: with workers, a file a worker could not
    prepare is read again here, in order, so the error raised (and which file it names) is the
    serial path's; a worker pool that breaks (a worker killed) falls back to the serial path.

    Parameters
    ----------
    workers : int, optional
        Worker processes (forked; 1 reads in this process). Default: one per idle CPU, up
        to 4, when there are at least :data:`PARALLEL_FROM` files and the platform forks (on
        a busy machine that is 1: the serial path).
    """
    files = [str(f) for f in files]
    if workers is None:
        workers = _idle_cpus() if len(files) >= PARALLEL_FROM else 1
    stated = StatedDigests()
    if workers < 2 or "fork" not in multiprocessing.get_all_start_methods():
        return [read_record_file(f, stated) for f in files]
    try:
        with ProcessPoolExecutor(workers, mp_context=multiprocessing.get_context("fork"),
                                 initializer=_worker_start,
                                 initargs=(os.getpid(),)) as pool:
            out = list(pool.map(_prepare_compressed, files, chunksize=32))
    except (BrokenProcessPool, OSError):
        return [read_record_file(f, stated) for f in files]
    for i, r in enumerate(out):
        if r is None:
            out[i] = read_record_file(files[i], stated)      # raises the file's own located error
    return out


def _now() -> str:
    return datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def add_prepared(book: str | Path, records: Sequence[PreparedRecord], *,
                 wait_s: float = DEFAULT_WAIT_S, create_folder: bool = False) -> list[int]:
    """Add checked records to the book at ``book`` (created when absent) in one transaction.

    ``create_folder`` makes the book's folder first (for the per-user default location).
    """
    p = Path(book)
    existed = p.exists()
    if create_folder and not existed:
        p.parent.mkdir(parents=True, exist_ok=True)
    try:
        with Logbook.open(p, write=True, create=True, wait_s=wait_s) as lb:
            return lb.add(records, added_utc=_now())
    except BaseException:
        if not existed:
            # a new book whose first add was refused: leave nothing behind
            for leftover in (p, p.with_name(p.name + "-journal")):
                leftover.unlink(missing_ok=True)
        raise


def stage_add(book: str | Path, records: Sequence[PreparedRecord], *,
              wait_s: float = DEFAULT_WAIT_S, create_folder: bool = False):
    """Add checked records to the book without committing: the rows are inserted in an open
    transaction, to be committed together with files (budget.staging.OutputSet.transaction).

    Returns
    -------
    ids : list of int
        The records' numbers in the book (once committed).
    commit, rollback : callable
        ``commit()`` makes the rows permanent (on failure it leaves the book as it was and
        raises DataError); ``rollback()`` undoes them. Either closes the book. A book (and
        folders) this call created are removed again by ``rollback()`` or a failed
        ``commit()``, so a refused or interrupted first add leaves nothing behind.
    """
    p = Path(book)
    existed = p.exists()
    made: list[Path] = []              # folders made here, innermost first
    if create_folder and not existed:
        made = [d for d in (p.parent, *p.parent.parents) if not d.exists()]
        p.parent.mkdir(parents=True, exist_ok=True)
    lb = None

    def forget() -> None:
        if lb is not None:
            lb.close()
        if not existed:
            for leftover in (p, p.with_name(p.name + "-journal")):
                leftover.unlink(missing_ok=True)
            for folder in made:
                with contextlib.suppress(OSError):   # only if still empty
                    folder.rmdir()

    try:
        lb = Logbook.open(p, write=True, create=True, wait_s=wait_s)
        ids = lb.add_pending(records, added_utc=_now())
    except BaseException:
        forget()
        raise

    def commit() -> None:
        try:
            lb.commit_pending()
        except BaseException:
            forget()
            raise
        lb.close()

    def rollback() -> None:
        lb.rollback_pending()
        forget()

    return ids, commit, rollback


def add_files(book: str | Path, files: Sequence[str | Path], *,
              wait_s: float = DEFAULT_WAIT_S, create_folder: bool = False,
              workers: int | None = None) -> list[int]:
    """Read and check every file, then add them all in one transaction; returns their ids.

    ``workers``: see :func:`prepare_files` (default: in parallel from 256 files on, on idle
    CPUs).

    Raises
    ------
    DataError or UsageError
        Any file not a record of this version, tampered, already in the book; the book not a
        logbook, newer, read-only or locked. Nothing is added then.
    """
    if not files:
        raise UsageError("give at least one record file", field="RECORD")
    prepared = prepare_files(files, workers)
    return add_prepared(book, prepared, wait_s=wait_s, create_folder=create_folder)


def export_name(rid: int, sha256: str) -> str:
    """File name of an exported record: its number in the book and the start of its digest."""
    return f"{rid:06d}-{sha256[:12]}.json"


def export_book(lb: Logbook, out: str | Path) -> list[Path]:
    """Every record back as its original bytes in ``out`` (absent or empty), with SHA256SUMS.

    Raises
    ------
    UsageError
        ``out`` is a file, a non-empty folder, or its parent folder is missing.
    DataError
        A stored record that no longer matches its digest (nothing is written then).
    """
    dest = Path(out)
    if dest.exists() and (not dest.is_dir() or any(dest.iterdir())):
        raise UsageError("must be a new or empty folder", file=str(out), field="DIR")
    if not dest.parent.is_dir():
        raise UsageError("the parent folder does not exist", file=str(out), field="DIR")
    records = lb.all_records()          # every digest is checked before anything is written
    tmp = Path(tempfile.mkdtemp(prefix=temp_prefix(dest), suffix=".part", dir=dest.parent))
    os.chmod(tmp, new_folder_mode())  # mkdtemp makes it 0700
    try:
        lines, paths = [], []
        for rid, sha, raw in records:
            name = export_name(rid, sha)
            (tmp / name).write_bytes(raw)
            assert hashlib.sha256(raw).hexdigest() == sha  # checked by all_records
            lines.append(f"{sha}  {name}\n")
            paths.append(dest / name)
        (tmp / "SHA256SUMS").write_text("".join(lines), encoding="utf-8")
        if dest.exists():
            dest.rmdir()
        os.replace(tmp, dest)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return paths
