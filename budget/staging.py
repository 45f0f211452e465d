"""All-or-nothing output: the files (and archive folders) a command writes are staged under
temporary names beside their targets and committed together at the end.

A command that writes several outputs (``report --html H -o P --archive A``,
``run --json R --archive A``) stages each of them while it works; nothing appears under a final
name until :meth:`OutputSet.commit`, which renames them all. If anything fails before or during
the commit — bad input, an OS error, SIGINT/SIGTERM — every staged temporary is removed and every
target renamed so far is put back as it was, so a failed or stopped command leaves the folder as
it found it. Signals that arrive during the renames are held until the commit is complete (the
renames take microseconds), so a stop lands either before the commit (nothing written) or after
it (everything written); :func:`committed` tells the CLI which, for an honest message.

A symbolic link is written through: its target is staged and replaced, the link kept. A target
that cannot be renamed onto (``-`` for standard output, a FIFO, a character device) is not
staged: its bytes are kept in memory and written by :func:`budget.outputs.write_atomic` as the
last step of the commit.

A change outside the file system that must go with the files (``run --logbook``: the record's
row in the SQLite logbook) joins the set with :meth:`OutputSet.transaction`: its work is done
and left uncommitted while staging; its commit runs after the renames (inside the held
signals) and a failure there puts the renamed files back; any failure before it runs its
rollback.
"""

from __future__ import annotations

import contextlib
import os
import secrets
import shutil
import signal
import stat
import tempfile
import threading
from dataclasses import dataclass
from pathlib import Path

from .outputs import temp_prefix, write_atomic

__all__ = ["OutputSet", "committed", "reset_committed"]

_COMMITTED: list[str] = []   # targets committed since the last reset (one CLI command)
_HELD = [s for s in (getattr(signal, n, None) for n in ("SIGINT", "SIGTERM", "SIGHUP")) if s]


def committed() -> tuple[str, ...]:
    """The outputs committed since :func:`reset_committed` (in commit order)."""
    return tuple(_COMMITTED)


def reset_committed() -> None:
    _COMMITTED.clear()


@contextlib.contextmanager
def _signals_held():
    """Hold SIGINT/SIGTERM/SIGHUP while the body runs: a signal that arrives is recorded and
    handed to the previous handler when the body ends. (A Python-level hold rather than a
    thread signal mask: the kernel may deliver a process signal to another thread.)"""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    pending: list[int] = []
    previous = {}
    for sig in _HELD:
        try:
            previous[sig] = signal.signal(sig, lambda signum, frame: pending.append(signum))
        except (ValueError, OSError):  # pragma: no cover - not settable here
            pass
    try:
        yield
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)
        if pending:
            handler = previous.get(pending[0])
            if callable(handler):
                handler(pending[0], None)
            elif handler == signal.SIG_DFL:
                os.kill(os.getpid(), pending[0])


@dataclass
class _Item:
    target: Path
    shown: str
    tmp: Path | None = None          # staged file or folder
    data: bytes | None = None        # for targets written directly at the end
    folder: bool = False
    backup: Path | None = None       # the target's previous content during the commit
    done: bool = False


def _direct(p: Path, name: str) -> bool:
    """A target that must be written in place rather than renamed onto."""
    if name == "-":
        return True
    try:
        mode = os.stat(p).st_mode
    except OSError:
        return False
    return not (stat.S_ISREG(mode) or stat.S_ISDIR(mode))


class OutputSet:
    """Outputs staged now and committed together (use as a context manager).

    Example::

        with OutputSet() as out:
            out.file("result.json", text)
            out.folder("arch", build_into)   # build_into(tmp_folder) fills a new folder
            out.commit()

    Leaving the ``with`` block without :meth:`commit` (an exception, a signal) discards
    everything staged.
    """

    def __init__(self) -> None:
        self._items: list[_Item] = []
        self._hooks: list[_Hook] = []
        self._committed = False

    def __enter__(self) -> OutputSet:
        return self

    def __exit__(self, *exc) -> None:
        if not self._committed:
            self.discard()

    # ------------------------------------------------------------------ staging
    def file(self, path: str | Path, data: bytes | str) -> None:
        """Stage ``data`` for ``path`` (same-folder temporary file, flushed to disk)."""
        raw = data.encode("utf-8") if isinstance(data, str) else bytes(data)
        p = Path(path)
        if p.is_symlink():  # write through the link: the link itself stays
            p = Path(os.path.realpath(p))
        item = _Item(target=p, shown=str(path))
        if _direct(p, str(path)):
            item.data = raw
            self._items.append(item)
            return
        self._items.append(item)
        fd, tmp = tempfile.mkstemp(prefix=temp_prefix(p), suffix=".part", dir=p.parent)
        item.tmp = Path(tmp)
        with os.fdopen(fd, "wb") as fh:
            fh.write(raw)
            fh.flush()
            os.fsync(fh.fileno())

    def folder(self, path: str | Path, build) -> object:
        """Stage a folder: ``build(tmp)`` fills the new, empty folder ``tmp`` beside ``path``;
        its return value is returned."""
        p = Path(path)
        item = _Item(target=p, shown=str(path), folder=True)
        self._items.append(item)
        item.tmp = Path(tempfile.mkdtemp(prefix=temp_prefix(p), suffix=".part", dir=p.parent))
        return build(item.tmp)

    def transaction(self, shown: str, commit, rollback) -> None:
        """Join a prepared, not yet committed change (a database transaction) to the set.

        ``commit()`` runs after every file is renamed into place; when it raises, the files
        are put back and the error propagates. ``rollback()`` runs when the set is discarded
        before that (a failure, a signal); it must not raise. Only one transaction can be made
        all-or-nothing with the files (a second one could not be taken back once the first
        has committed), so a second is refused. ``shown`` names the change in messages.
        """
        if self._hooks:
            raise RuntimeError("an OutputSet takes at most one transaction")
        self._hooks.append(_Hook(shown, commit, rollback))

    # ------------------------------------------------------------------ commit
    def commit(self) -> tuple[str, ...]:
        """Rename every staged output onto its target, then commit the transaction (if
        any); all or none. Returns the targets (and the transaction's name)."""
        with _signals_held():
            try:
                for item in self._items:
                    self._commit_one(item)
                for hook in self._hooks:  # after the renames: a failure here undoes them
                    hook.done = True      # a COMMIT that raised has rolled back itself
                    hook.commit()
                for item in self._items:  # in place, last: these cannot be taken back
                    if item.data is not None:
                        write_atomic(item.shown, item.data)
                        item.done = True
            except BaseException:
                self._roll_back()
                for item in self._items:  # the failing item's old version is still in place
                    if item.backup is not None:
                        _remove(item.backup)
                        item.backup = None
                raise
            self._committed = True
            names = tuple(i.shown for i in self._items) + tuple(h.shown for h in self._hooks)
            _COMMITTED.extend(names)
        for item in self._items:  # the old versions are no longer needed
            if item.backup is not None:
                _remove(item.backup)
        return names

    def _commit_one(self, item: _Item) -> None:
        p = item.target
        if item.tmp is None:  # written in place, last (it cannot be taken back)
            return
        if item.folder:
            if p.is_dir() and not any(p.iterdir()):
                p.rmdir()
            if p.exists():
                item.backup = Path(tempfile.mkdtemp(prefix=temp_prefix(p), suffix=".old",
                                                    dir=p.parent))
                item.backup.rmdir()
                os.replace(p, item.backup)
        elif p.exists():
            item.backup = p.parent / f"{temp_prefix(p)}{secrets.token_hex(4)}.old"
            try:   # the old bytes stay reachable until the commit is done
                os.link(p, item.backup)
            except OSError:  # a file system without hard links
                shutil.copy2(p, item.backup)
        os.replace(item.tmp, p)
        item.tmp, item.done = None, True

    def _roll_back(self) -> None:
        for item in reversed(self._items):
            if item.done and item.data is None:
                if item.folder:
                    _remove(item.target)
                if item.backup is not None:
                    os.replace(item.backup, item.target)
                elif not item.folder:
                    _remove(item.target)
                item.backup, item.done = None, False
        self.discard()

    def discard(self) -> None:
        """Remove every staged temporary and roll the transaction back (nothing under a final
        name is touched)."""
        for item in self._items:
            if item.tmp is not None:
                _remove(item.tmp)
                item.tmp = None
        for hook in self._hooks:
            if not hook.done:
                hook.done = True
                hook.rollback()


@dataclass
class _Hook:
    shown: str
    commit: object
    rollback: object
    done: bool = False


def _remove(p: Path) -> None:
    try:
        if p.is_dir() and not p.is_symlink():
            shutil.rmtree(p, ignore_errors=True)
        else:
            p.unlink()
    except FileNotFoundError:
        pass
