"""Safe output paths: what an output option may write to, and how.

The rules (README "Output files"):

* ``-`` is standard output.
* A new path is created with the user's umask (``0666 & ~umask``: 0644 under umask 022).
* An existing regular file is replaced atomically (same-folder temporary file, flush, rename):
  an interrupted run leaves the old file or the new one, never half a file. The new file keeps
  the old one's permission bits (and owner, where the OS lets us). Commands whose output is a
  signed product (``sign -o``, ``identity create``) replace only with ``--force``.
* A path that is not a regular file is never replaced by one: a character device, a FIFO, a
  pipe behind ``/dev/fd/N`` (``>(jq .)``) or a descriptor such as ``/dev/stdout`` is opened
  and written in place; a folder, a block device or a socket is refused.
* A symbolic link is never replaced. A link to a device, FIFO or descriptor is written through
  (as above); a link to a regular file would change a file elsewhere, so it is refused unless
  ``--force``, which replaces the link's target atomically and keeps the link.
* A missing folder, a name longer than the file system allows and every OS error are one
  located line (exit 2); temporary names are kept within the folder's name limit.
"""

from __future__ import annotations

import os
import re
import stat
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path

from .errors import UsageError

__all__ = ["Target", "classify", "write_atomic", "write_in_place", "check_writable",
           "name_max", "temp_prefix", "stage_file", "new_file_mode", "new_folder_mode", "STDOUT",
           "on_stdout", "set_stdout"]

STDOUT = "-"
_DESCRIPTOR = re.compile(r"^/(?:dev/fd|proc/(?:self|thread-self|\d+)(?:/task/\d+)?/fd)/\d+$|"
                         r"^/dev/(?:stdout|stderr)$")
_stdout_stream = None   # where '-' goes (cli.main sets the real standard output here)


@dataclass(frozen=True)
class Target:
    """Where an output's bytes go.

    ``kind`` is ``"stdout"`` (``-``), ``"new"`` (created), ``"file"`` (an existing regular
    file, replaced atomically at ``path``, which is a symbolic link's target when one was
    followed) or ``"stream"`` (written in place: device, FIFO, pipe, open descriptor).
    ``shown`` is the name as the user gave it.
    """

    path: Path
    kind: str
    shown: str

    @property
    def in_place(self) -> bool:
        return self.kind in ("stdout", "stream")

    def to_dict(self) -> dict:
        return {"path": str(self.path), "kind": self.kind, "shown": self.shown}


def _refuse(message: str, name: str, field: str) -> UsageError:
    return UsageError(message, file=name, field=field)


def _via_descriptor(p: Path) -> bool:
    """True when ``p`` names an open descriptor (``/dev/stdout``, ``/dev/fd/N``,
    ``/proc/self/fd/N``) itself or through a chain of symbolic links."""
    cur = os.path.abspath(p)
    for _ in range(40):
        if _DESCRIPTOR.match(cur):
            return True
        try:
            nxt = os.readlink(cur)
        except OSError:
            return False
        cur = os.path.normpath(os.path.join(os.path.dirname(cur), nxt))
    return False


def classify(path: str | Path, *, force: bool = False, replace: bool = True,
             field: str = "output") -> Target:
    """Decide how ``path`` may be written, or refuse it (module docstring).

    Parameters
    ----------
    path : str or Path
        The output path as given; ``-`` is standard output.
    force : bool
        The user gave ``--force``: a symbolic link to a regular file may be written through,
        and an existing file replaced where ``replace`` is False. Default False.
    replace : bool
        An existing regular file may be replaced without ``force``. Default True.
    field : str
        The option named in a refusal. Default ``"output"``.

    Raises
    ------
    UsageError
        One located line: why this path is not written.
    """
    name = str(path)
    if name == STDOUT:
        return Target(Path(STDOUT), "stdout", name)
    p = Path(path)
    try:
        lst = os.lstat(p)
    except FileNotFoundError:
        lst = None
    except OSError as exc:
        raise _refuse(f"cannot use this path ({exc.strerror})", name, field) from None
    if lst is None:
        parent = p.parent
        limit = name_max(parent) if parent.is_dir() else 255
        size = len(p.name.encode("utf-8", "surrogateescape"))
        if size > limit:
            raise _refuse(f"file name too long ({size} bytes; the folder allows {limit})",
                          name, field)
        if not parent.is_dir():
            raise _refuse("the folder does not exist", name, field)
        return Target(p, "new", name)
    mode = lst.st_mode
    link = stat.S_ISLNK(mode)
    if link:
        try:
            mode = os.stat(p).st_mode
        except OSError:
            raise _refuse("is a symbolic link to a missing file; give the file itself",
                          name, field) from None
    if stat.S_ISDIR(mode):
        raise _refuse("is a folder, not a file", name, field)
    if stat.S_ISCHR(mode) or stat.S_ISFIFO(mode) or _via_descriptor(p):
        if stat.S_ISCHR(mode) or stat.S_ISFIFO(mode) or stat.S_ISREG(mode):
            return Target(p, "stream", name)
    if not stat.S_ISREG(mode):
        what = ("a block device" if stat.S_ISBLK(mode) else
                "a socket" if stat.S_ISSOCK(mode) else "not a regular file")
        raise _refuse(f"is {what}; nothing is written to it", name, field)
    if link:
        if not force:
            raise _refuse("is a symbolic link to a file; use --force to replace that file "
                          "(the link is kept)", name, field)
        return Target(Path(os.path.realpath(p)), "file", name)
    if not replace and not force:
        raise _refuse("exists already; use --force to replace it", name, field)
    return Target(p, "file", name)


def check_writable(path: str | Path, *, force: bool = False, replace: bool = True,
                   field: str = "output") -> Target:
    """Refuse an unusable output path before any work is done (see :func:`classify`)."""
    return classify(path, force=force, replace=replace, field=field)


def name_max(folder: str | Path) -> int:
    """The longest file name (bytes) the folder's file system allows; 255 when unknown."""
    try:
        return int(os.pathconf(folder, "PC_NAME_MAX"))
    except (AttributeError, ValueError, OSError):  # no pathconf (Windows), or no such folder
        return 255


def temp_prefix(path: str | Path) -> str:
    """The prefix of a temporary name beside ``path``: ``.NAME.`` with NAME shortened so that
    prefix + 8 random characters + ``.part`` (or ``.old``) stay within the folder's limit."""
    p = Path(path)
    room = name_max(p.parent if str(p.parent) else ".") - 2 - 8 - 5
    name = p.name
    while len(name.encode("utf-8", "surrogateescape")) > room:
        name = name[:-1]
    return f".{name}."


def _umask() -> int:
    """The process's umask (from /proc where it is shown, else set-and-restore)."""
    try:
        with open("/proc/self/status", encoding="ascii", errors="replace") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError, IndexError):
        pass
    old = os.umask(0o022)
    os.umask(old)
    return old


def new_file_mode() -> int:
    """The mode of a new output file: 0666 less the umask (0644 under umask 022)."""
    return 0o666 & ~_umask()


def new_folder_mode() -> int:
    """The mode of a new output folder: 0777 less the umask (0755 under umask 022)."""
    return 0o777 & ~_umask()


def set_stdout(stream) -> None:
    """Where ``-`` writes (the command's real standard output); None: ``sys.stdout``."""
    global _stdout_stream
    _stdout_stream = stream


def on_stdout(name: str | None) -> bool:
    """True when the output ``name`` is standard output: ``-``, or the very file, pipe or
    terminal that descriptor 1 is open on."""
    if not name:
        return False
    if name == STDOUT:
        return True
    try:
        return os.path.samestat(os.stat(name), os.fstat(1)) and (
            _via_descriptor(Path(name)) or not stat.S_ISREG(os.stat(name).st_mode))
    except (OSError, ValueError):
        return False


def _write_stdout(raw: bytes) -> None:
    out = _stdout_stream or sys.stdout
    buf = getattr(out, "buffer", None)
    if buf is not None:
        out.flush()
        buf.write(raw)
        buf.flush()
    else:  # a text stream (tests capture stdout in a StringIO)
        out.write(raw.decode("utf-8", "replace"))
        out.flush()


def write_in_place(target: Target, raw: bytes) -> None:
    """Write to standard output or open and write a device, FIFO or descriptor in place
    (never created, never renamed onto; a regular file reached through a descriptor is
    appended to, as the shell's ``>`` or ``>>`` left it)."""
    if target.kind == "stdout":
        _write_stdout(raw)
        return
    flags = os.O_WRONLY | getattr(os, "O_NOCTTY", 0) | getattr(os, "O_CLOEXEC", 0)
    fd = os.open(target.path, flags)
    try:
        if stat.S_ISREG(os.fstat(fd).st_mode):
            os.lseek(fd, 0, os.SEEK_END)
        view = memoryview(raw)
        while view:
            n = os.write(fd, view)
            view = view[n:]
    finally:
        os.close(fd)


def stage_file(target: Target, raw: bytes, mode: int | None) -> Path:
    """``raw`` in a flushed temporary file beside ``target.path``, with its final mode."""
    p = target.path
    fd, tmp = tempfile.mkstemp(prefix=temp_prefix(p), suffix=".part", dir=p.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            old = None
            if target.kind == "file":
                try:
                    old = os.stat(p)
                except OSError:
                    old = None
            if mode is None:
                mode = stat.S_IMODE(old.st_mode) & 0o777 if old is not None else new_file_mode()
            os.fchmod(fh.fileno(), mode)
            if old is not None and hasattr(os, "fchown"):
                try:  # keep the owner where we may (root replacing another user's file)
                    os.fchown(fh.fileno(), old.st_uid, old.st_gid)
                except OSError:
                    pass
            fh.write(raw)
            fh.flush()
            os.fsync(fh.fileno())
    except BaseException:
        _discard(tmp)
        raise
    return Path(tmp)


def _discard(tmp: str | Path) -> None:
    """Remove a temporary file of ours that may already be gone (an error path)."""
    try:
        os.unlink(tmp)
    except FileNotFoundError:
        pass


def write_atomic(path: str | Path, data: bytes | str, *, force: bool = False,
                 mode: int | None = None) -> Path:
    """Write ``data`` to ``path`` by the rules of this module: a new or regular file
    atomically (temporary file + fsync + rename), a device, FIFO, descriptor or ``-`` in
    place. ``mode``: the new file's permission bits (default: see :func:`new_file_mode`)."""
    raw = data.encode("utf-8") if isinstance(data, str) else bytes(data)
    target = classify(path, force=force)
    if target.in_place:
        write_in_place(target, raw)
        return target.path
    tmp = stage_file(target, raw, mode)
    try:
        os.replace(tmp, target.path)
    except BaseException:
        _discard(tmp)
        raise
    return target.path
