"""Evidence that can be re-checked years later: input manifests, archives and recomputation.

Two things live here:

* :func:`input_manifest` — the list of files a result record was computed from (spec and data
  files with their SHA-256 digests). ``budget sign`` embeds it in the signed PDF.
* :func:`archive` — a content-addressed folder holding the spec, every input file and the
  record, so the same budget can be recomputed later::

      DIR/manifest.json          schema, software, spec, files (original relative paths,
                                 digests, sizes), record digest, run settings
      DIR/record.json            the result record, byte for byte as ``run --json`` writes it
      DIR/objects/<sha256>       each file's bytes, named by their digest

  The archive holds no timestamp, so the same spec, inputs and seed give a byte-identical
  archive. It is built in a temporary folder beside DIR and renamed into place; an existing
  archive is replaced only with ``force``, and a folder that is not an archive never.
* recomputation from an archive or a folder is :func:`budget.recompute.recompute`.

Paths in manifests are POSIX paths relative to the spec's folder; a data file outside that
folder gets a ``../`` path, which :func:`restore` recreates inside its destination.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
from dataclasses import dataclass
from pathlib import Path, PurePosixPath
from typing import Any

from . import __version__
from .errors import DataError, UsageError
from .outputs import name_max, new_file_mode, new_folder_mode, temp_prefix
from .record import record_data

__all__ = ["MANIFEST_SCHEMA", "ARCHIVE_SCHEMA", "input_manifest", "archive",
           "check_archive_target", "is_archive", "read_archive", "restore", "hash_file",
           "ArchiveInfo", "ArchiveContents"]

MANIFEST_SCHEMA = "qcs-budget/inputs-1"
ARCHIVE_SCHEMA = "qcs-budget/archive-1"
_BLOCK = 1 << 20  # bytes read at a time when hashing or copying


def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def hash_file(path: Path) -> str | None:
    """Hex SHA-256 of a file, or None when it cannot be read."""
    h = hashlib.sha256()
    try:
        with open(path, "rb") as fh:
            for block in iter(lambda: fh.read(_BLOCK), b""):
                h.update(block)
    except OSError:
        return None
    return h.hexdigest()


# --------------------------------------------------------------------------- manifest
def input_manifest(record_json: str | bytes, spec_bytes: bytes, *,
                   spec_name: str | None = None) -> dict[str, Any]:
    """The input-file manifest of a record: the spec and the data files, with digests.

    Parameters
    ----------
    record_json : str or bytes
        The result record (``Budget.to_json()``).
    spec_bytes : bytes
        The spec file's bytes, exactly as read (the digest is over them).
    spec_name : str, optional
        The spec's file name; default the record's ``run.spec_file``.

    Raises
    ------
    DataError
        When the spec's digest differs from the record's ``run.spec_sha256``: the record was not
        computed from this spec.
    """
    rec = record_data(record_json, file="record")
    run = rec["run"]
    digest = _sha256(spec_bytes)
    if run.get("spec_sha256") not in (None, digest):
        raise DataError(f"the record was computed from another spec (record: spec sha256 "
                        f"{run.get('spec_sha256')}; this spec: {digest})",
                        file=spec_name or run.get("spec_file"), field="spec_sha256")
    name = spec_name or run.get("spec_file") or "spec.toml"
    files = [{"path": str(f["path"]), "sha256": str(f["sha256"])}
             for f in run.get("files", []) if isinstance(f, dict) and "path" in f]
    return {"schema": MANIFEST_SCHEMA, "software": run.get("software", ""),
            "spec": {"file": Path(name).name, "sha256": digest, "size": len(spec_bytes)},
            "files": files}


# --------------------------------------------------------------------------- archive
@dataclass(frozen=True)
class ArchiveInfo:
    """What :func:`archive` wrote: the folder, the spec digest and the files (path, digest)."""

    path: str
    spec_sha256: str
    files: tuple[tuple[str, str], ...]

    def to_dict(self) -> dict[str, Any]:
        return {"path": self.path, "spec_sha256": self.spec_sha256,
                "files": [{"path": p, "sha256": h} for p, h in self.files]}


def is_archive(folder: str | Path) -> bool:
    """True when ``folder`` holds a manifest.json of an archive written by :func:`archive`."""
    m = Path(folder) / "manifest.json"
    try:
        return json.loads(m.read_text("utf-8")).get("schema") == ARCHIVE_SCHEMA
    except (OSError, ValueError, AttributeError):
        return False


def check_archive_target(out_dir: str | Path, *, force: bool = False) -> Path:
    """Refuse an archive folder that cannot be written (call before a long computation).

    An absent or empty folder is fine; an existing archive only with ``force``; a non-empty
    folder that is not an archive never (``force`` must not delete a user's folder).
    """
    out = Path(out_dir)
    if out.parent.is_dir() and len(out.name.encode("utf-8", "surrogateescape")) > \
            name_max(out.parent):
        raise UsageError(f"folder name too long (the file system allows "
                         f"{name_max(out.parent)} bytes)", file=str(out_dir), field="--archive")
    if not out.parent.is_dir():
        raise UsageError("the folder it would go in does not exist", file=str(out_dir),
                         field="--archive")
    if out.exists() and not out.is_dir():
        raise UsageError("exists and is not a folder", file=str(out_dir), field="--archive")
    if out.is_dir() and any(out.iterdir()):
        if not is_archive(out):
            raise UsageError("is a non-empty folder that is not a budget archive; refusing to "
                             "replace it", file=str(out_dir), field="--archive")
        if not force:
            raise UsageError("an archive exists there already; use --force-archive to replace it",
                             file=str(out_dir), field="--archive")
    return out


def _relative(path_text: str, folder: Path) -> str:
    """A record's file path as a POSIX path relative to the spec folder (may start '../')."""
    p = Path(path_text)
    if not p.is_absolute():
        return PurePosixPath(*p.parts).as_posix()
    return PurePosixPath(*Path(os.path.relpath(p, folder)).parts).as_posix()


def _copy_object(src: Path, objects: Path, expected: str | None, shown: str) -> tuple[str, int]:
    """Copy a file into objects/<sha256> while hashing it; refuse a changed file."""
    h = hashlib.sha256()
    fd, tmp = tempfile.mkstemp(dir=objects, suffix=".part")
    os.fchmod(fd, new_file_mode())  # mkstemp makes it 0600; an archive is read by others
    size = 0
    with os.fdopen(fd, "wb") as out, open(src, "rb") as fh:
        for block in iter(lambda: fh.read(_BLOCK), b""):
            h.update(block)
            out.write(block)
            size += len(block)
        out.flush()
        os.fsync(out.fileno())
    digest = h.hexdigest()
    if expected is not None and digest != expected:
        os.unlink(tmp)
        raise DataError("changed since the budget read it (sha256 differs); run it again",
                        file=shown)
    os.replace(tmp, objects / digest)
    return digest, size


def _write(path: Path, data: bytes) -> None:
    with open(path, "wb") as fh:
        fh.write(data)
        fh.flush()
        os.fsync(fh.fileno())


def archive(spec, budget, out_dir: str | Path, *, force: bool = False) -> ArchiveInfo:
    """Copy the spec, every input file and the record into a content-addressed folder.

    The folder is built beside ``out_dir`` under a temporary name and renamed into place
    (:func:`build_archive` builds without the rename, for a command that commits several
    outputs together).

    Parameters
    ----------
    spec : budget.spec.Spec
        The spec that was evaluated (read from a file).
    budget : budget.result.Budget
        Its result; ``run.files`` names the data files and the digests they had when read.
    out_dir : str or Path
        The archive folder (see :func:`check_archive_target` for what may be there).
    force : bool
        Replace an existing archive. Default False.

    Raises
    ------
    UsageError
        When the target may not be written.
    DataError
        When the spec or a data file changed since the budget read it, or cannot be read.
    """
    out = check_archive_target(out_dir, force=force)
    tmp = Path(tempfile.mkdtemp(prefix=temp_prefix(out), suffix=".part", dir=out.parent))
    os.chmod(tmp, new_folder_mode())  # mkdtemp makes it 0700
    try:
        info = build_archive(spec, budget, tmp, shown=str(out))
        _swap_into_place(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return info


def build_archive(spec, budget, tmp: Path, *, shown: str) -> ArchiveInfo:
    """Fill the new, empty folder ``tmp`` with the archive of ``spec`` and ``budget`` (see
    :func:`archive`); ``shown`` is the folder's final name, reported in the ArchiveInfo."""
    folder = Path(spec.folder)
    spec_path = Path(spec.path)
    try:
        spec_bytes = spec_path.read_bytes()
    except OSError:
        raise DataError("cannot read the spec to archive it", file=spec.path) from None
    if _sha256(spec_bytes) != spec.sha256 or \
            budget.run.get("spec_sha256", spec.sha256) != spec.sha256:
        raise DataError("the spec changed since the budget read it; run it again",
                        file=spec.path)
    record = budget.to_json().encode("utf-8")
    entries = []
    for f in budget.run.get("files", []):
        src = Path(f["path"])
        src = src if src.is_absolute() else folder / src
        entries.append((_relative(f["path"], folder), src, f["sha256"]))

    # the caller removes tmp on any failure
    objects = tmp / "objects"
    objects.mkdir()
    spec_digest, spec_size = _copy_object(spec_path, objects, spec.sha256, spec.path)
    files = []
    for rel, src, expected in entries:
        try:
            digest, size = _copy_object(src, objects, expected, str(src))
        except OSError:
            raise DataError("cannot read this input file to archive it",
                            file=str(src)) from None
        files.append({"path": rel, "sha256": digest, "size": size})
    _write(tmp / "record.json", record)
    run = budget.run
    manifest = {
        "schema": ARCHIVE_SCHEMA,
        "software": f"qcs-budget {__version__}",
        "spec": {"path": spec_path.name, "sha256": spec_digest, "size": spec_size},
        "files": files,
        "record": {"path": "record.json", "sha256": _sha256(record)},
        "run": {"seed": run.get("seed"), "trials_setting": run.get("trials_setting"),
                "monte_carlo_enabled": run.get("monte_carlo_enabled")},
    }
    _write(tmp / "manifest.json",
           (json.dumps(manifest, indent=2, ensure_ascii=False) + "\n").encode("utf-8"))
    return ArchiveInfo(path=shown, spec_sha256=spec_digest,
                       files=tuple((f["path"], f["sha256"]) for f in files))


def _swap_into_place(tmp: Path, out: Path) -> None:
    """Rename the finished folder to ``out``; an old archive is moved aside, then removed.

    At every moment ``out`` is either the old complete archive, absent, or the new one.
    """
    if out.is_dir() and not any(out.iterdir()):
        out.rmdir()
    if not out.exists():
        os.replace(tmp, out)
        return
    old = Path(tempfile.mkdtemp(prefix=temp_prefix(out), suffix=".old", dir=out.parent))
    old.rmdir()
    os.replace(out, old)
    try:
        os.replace(tmp, out)
    except BaseException:
        os.replace(old, out)
        raise
    shutil.rmtree(old, ignore_errors=True)


# --------------------------------------------------------------------------- reading back
@dataclass(frozen=True)
class ArchiveContents:
    """An archive read back and checked: its manifest, spec bytes and record text."""

    folder: str
    manifest: dict[str, Any]
    spec_bytes: bytes
    record_json: str


def _safe_rel(rel: Any, shown: str) -> PurePosixPath:
    if not isinstance(rel, str) or not rel:
        raise DataError("a file entry has no 'path'", file=shown, field="files")
    p = PurePosixPath(rel)
    if p.is_absolute():
        raise DataError(f"absolute path {rel!r} in an archive", file=shown, field="files")
    return p


def read_archive(folder: str | Path) -> ArchiveContents:
    """Read an archive and check every object's digest.

    Raises
    ------
    DataError
        Naming the manifest or the object whose bytes no longer match their digest.
    """
    root = Path(folder)
    shown = str(root / "manifest.json")
    try:
        manifest = json.loads((root / "manifest.json").read_text("utf-8"))
    except OSError:
        raise DataError("no manifest.json: not a budget archive", file=shown) from None
    except ValueError as exc:
        raise DataError(f"manifest.json is not valid JSON ({exc})", file=shown) from None
    if not isinstance(manifest, dict) or manifest.get("schema") != ARCHIVE_SCHEMA:
        raise DataError(f"not a budget archive (schema must be '{ARCHIVE_SCHEMA}')",
                        file=shown, field="schema")
    entries = [manifest.get("spec")] + list(manifest.get("files") or [])
    for e in entries:
        if not isinstance(e, dict) or not isinstance(e.get("sha256"), str) or \
                len(e["sha256"]) != 64 or any(c not in "0123456789abcdef" for c in e["sha256"]):
            raise DataError("an entry without a valid sha256", file=shown, field="files")
        obj = root / "objects" / e["sha256"]
        got = hash_file(obj)
        if got != e["sha256"]:
            what = "is missing" if got is None else "no longer matches its digest"
            raise DataError(f"the archived copy of {e.get('path')!r} {what}", file=str(obj))
    rec_entry = manifest.get("record") or {}
    try:
        record = (root / "record.json").read_bytes()
    except OSError:
        raise DataError("record.json is missing", file=str(root / "record.json")) from None
    if _sha256(record) != rec_entry.get("sha256"):
        raise DataError("record.json no longer matches its digest",
                        file=str(root / "record.json"))
    spec_bytes = (root / "objects" / manifest["spec"]["sha256"]).read_bytes()
    return ArchiveContents(folder=str(root), manifest=manifest, spec_bytes=spec_bytes,
                           record_json=record.decode("utf-8"))


def restore(folder: str | Path, dest: str | Path) -> Path:
    """Recreate the spec and its data files (original relative paths) under ``dest``.

    Returns the restored spec's path. Files that lay outside the spec's folder (``../``
    paths) are placed so that the same relative paths reach them, all inside ``dest``.
    """
    contents = read_archive(folder)
    m = contents.manifest
    shown = str(Path(folder) / "manifest.json")
    rels = [_safe_rel(f.get("path"), shown) for f in m.get("files", [])]
    depth = 0
    for r in rels:  # how far up the files reach: the spec goes that many folders down
        ups = 0
        for part in r.parts:
            if part != "..":
                break
            ups += 1
        depth = max(depth, ups)
    dest = Path(dest)
    spec_dir = dest.joinpath(*(["spec"] * depth)) if depth else dest
    spec_dir.mkdir(parents=True, exist_ok=True)
    base = dest.resolve()
    for r, f in zip(rels, m.get("files", [])):
        target = (spec_dir / Path(*r.parts)).resolve()
        if base != target and base not in target.parents:
            raise DataError(f"path {r.as_posix()!r} leaves the archive", file=shown,
                            field="files")
        target.parent.mkdir(parents=True, exist_ok=True)
        shutil.copyfile(Path(folder) / "objects" / f["sha256"], target)
    spec_path = spec_dir / Path(m["spec"]["path"]).name
    spec_path.write_bytes(contents.spec_bytes)
    return spec_path
