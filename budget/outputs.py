"""Loss-free output: every file is written to a temporary name, flushed and renamed.

An interrupted run therefore leaves either the old file or the new one, never half a file.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from .errors import UsageError

__all__ = ["write_atomic", "check_writable", "name_max", "temp_prefix"]


def check_writable(path: str | Path, *, force: bool = True) -> Path:
    """Refuse an output path whose folder does not exist, or an existing file without force."""
    p = Path(path)
    limit = name_max(p.parent) if p.parent.is_dir() else 255
    if len(p.name.encode("utf-8", "surrogateescape")) > limit:
        raise UsageError(f"file name too long ({len(p.name.encode('utf-8', 'surrogateescape'))} "
                         f"bytes; the folder allows {limit})", file=str(path), field="output")
    if p.exists() and p.is_dir():
        raise UsageError("is a folder, not a file", file=str(path), field="output")
    if not p.parent.exists():
        raise UsageError("the folder does not exist", file=str(path), field="output")
    if p.exists() and not force:
        raise UsageError("exists already; use --force to replace it", file=str(path),
                         field="output")
    return p


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


def write_atomic(path: str | Path, data: bytes | str) -> Path:
    """Write ``data`` to ``path`` atomically (same-folder temporary file + fsync + rename)."""
    p = Path(path)
    raw = data.encode("utf-8") if isinstance(data, str) else data
    fd, tmp = tempfile.mkstemp(prefix=temp_prefix(p), suffix=".part", dir=p.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(raw)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, p)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    return p
