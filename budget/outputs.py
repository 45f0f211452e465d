"""Loss-free output: every file is written to a temporary name, flushed and renamed.

An interrupted run therefore leaves either the old file or the new one, never half a file.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from .errors import UsageError

__all__ = ["write_atomic", "check_writable"]


def check_writable(path: str | Path, *, force: bool = True) -> Path:
    """Refuse an output path whose folder does not exist, or an existing file without force."""
    p = Path(path)
    if p.exists() and p.is_dir():
        raise UsageError("is a folder, not a file", file=str(path), field="output")
    if not p.parent.exists():
        raise UsageError("the folder does not exist", file=str(path), field="output")
    if p.exists() and not force:
        raise UsageError("exists already; use --force to replace it", file=str(path),
                         field="output")
    return p


def write_atomic(path: str | Path, data: bytes | str) -> Path:
    """Write ``data`` to ``path`` atomically (same-folder temporary file + fsync + rename)."""
    p = Path(path)
    raw = data.encode("utf-8") if isinstance(data, str) else data
    fd, tmp = tempfile.mkstemp(prefix=f".{p.name}.", suffix=".part", dir=p.parent)
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
