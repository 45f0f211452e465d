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

Which paths may be written, and how, is decided by :func:`budget.outputs.classify`: a symbolic
link to a regular file is written through only with ``force`` (its target is staged and
replaced, the link kept). A target that must not be renamed onto (``-`` for standard output, a
FIFO, a character device, a descriptor such as ``/dev/stdout``) is not staged: its bytes are
kept in memory and written in place as the last step of the commit. A staged file gets its
final mode before the rename (new: ``0666 & ~umask``; replacing: the old file's mode).

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

from .errors import UsageError
from .outputs import Target, classify, new_folder_mode, stage_file, temp_prefix, write_in_place

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
    data: bytes | None = None        # for targets written in place at the end
    folder: bool = False
    backup: Path | None = None       # the target's previous content during the commit
    done: bool = False
    kind: str = "new"                # budget.outputs.Target.kind (folders: "folder")
    written: Target | None = None    # the in-place target


def _check_unchanged(item: _Item) -> None:
    """Refuse to rename onto a target that became something else while the command ran
    (a link, a device, a folder where a file was): it would be replaced."""
    try:
        mode = os.lstat(item.target).st_mode
    except FileNotFoundError:
        return
    if not stat.S_ISREG(mode):
        raise UsageError("changed while the command ran (it is no longer a regular file); "
                         "nothing is written", file=item.shown, field="output")


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
    def file(self, path: str | Path, data: bytes | str, *, force: bool = False,
             mode: int | None = None) -> None:
        """Stage ``data`` for ``path`` (same-folder temporary file, flushed to disk).

        ``force``: the user gave ``--force`` (a symbolic link to a file is written through);
        ``mode``: the file's permission bits (default ``0666 & ~umask``, or the mode of the
        file it replaces). Refuses (UsageError) a path :func:`budget.outputs.classify`
        refuses.
        """
        raw = data.encode("utf-8") if isinstance(data, str) else bytes(data)
        target = classify(path, force=force)
        if target.kind == "stdout" and any(i.kind == "stdout" for i in self._items):
            raise UsageError("only one output can go to standard output ('-')",
                             file=str(path), field="output")
        item = _Item(target=target.path, shown=str(path), kind=target.kind)
        self._items.append(item)
        if target.in_place:
            item.data, item.written = raw, target
            return
        item.tmp = stage_file(target, raw, mode)

    def folder(self, path: str | Path, build) -> object:
        """Stage a folder: ``build(tmp)`` fills the new, empty folder ``tmp`` beside ``path``;
        its return value is returned."""
        p = Path(path)
        item = _Item(target=p, shown=str(path), folder=True, kind="folder")
        self._items.append(item)
        item.tmp = Path(tempfile.mkdtemp(prefix=temp_prefix(p), suffix=".part", dir=p.parent))
        os.chmod(item.tmp, new_folder_mode())  # mkdtemp makes it 0700; ours to set
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
                        write_in_place(item.written, item.data)
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
        else:
            _check_unchanged(item)
        if not item.folder and p.exists():
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
