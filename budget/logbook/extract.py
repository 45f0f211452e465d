"""A result record turned into what the logbook stores: the whole record, its digests and the
indexed columns (measurands, date, chain, pump, frequency, the calibrations it used, the terms
that other records may share).

Nothing here touches the book; :mod:`budget.logbook.store` writes what :func:`prepare` returns.

Digests
-------
* ``sha256`` — SHA-256 of the record file's bytes, exactly as added (the evidence archive's
  manifest uses the same digest for its ``record.json``); ``export`` writes those bytes back.
* ``canonical_sha256`` — SHA-256 of the record's canonical JSON (keys sorted, no whitespace,
  non-ASCII characters as ``\\u`` escapes) without ``run.modules`` (the modules' diagnostics
  and figure data, which follow from the spec, the input files and the seed — all in the
  digested part — and are most of a record's bytes): the same record re-indented is still the
  same record, so it cannot be added twice.
* ``spec_sha256`` — the record's ``run.spec_sha256``; ``manifest_sha256`` — SHA-256 of the
  canonical JSON of its input manifest (``run.files``: path and digest of every data file).

Tampering is caught where a digest is stated beside the record: a ``SHA256SUMS`` file in the
record's folder (the ``sha256sum`` format, which ``budget logbook export`` writes) or an
evidence archive's ``manifest.json`` (``record.sha256``), and inside the record, where every
data file's digest appears twice (``run.files`` and each input's ``source.files``).

Dates
-----
``[report] measurement_date`` is free text ("2026-11-17 20:00 to 23:02"). The first ISO date
(with an optional time) is the start; a second date after it, or a time alone, gives the end.
A record without a readable date is stored but left out of trends (the trend says so).
"""

from __future__ import annotations

import hashlib
import json
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..compare import term_key
from ..errors import DataError
from ..record import budget_from_data, record_data
from ..result import Budget

__all__ = ["PreparedRecord", "StatedDigests", "MeasurandRow", "CalibrationRow", "TermRow", "prepare",
           "parse_measurement_date", "canonical_json", "key_digest", "CALIBRATION_MODULES"]

#: input modules whose data file is a calibration (its digest names the calibration);
#: the on/off record (cycles) and the pump's characterisation change with every run
CALIBRATION_MODULES = frozenset({"resistor", "amplifier", "voltmeter", "frequency"})

_DATE = re.compile(r"(\d{4}-\d{2}-\d{2})(?:[ T](\d{1,2}:\d{2}(?::\d{2})?))?")
_TIME = re.compile(r"\b(\d{1,2}:\d{2}(?::\d{2})?)\b")
_TYPED = re.compile(r"^typed in \((.*)\)(?:;|$)", re.S)


@dataclass(frozen=True)
class MeasurandRow:
    name: str
    unit: str
    value: float
    standard_uncertainty: float
    expanded_uncertainty: float
    coverage_factor: float


@dataclass(frozen=True)
class CalibrationRow:
    """One calibration a record used: a data file (digest) or a typed-in source text."""

    input: str            # the spec's input name (R, A_TR, g ...)
    kind: str             # "file" or "typed in"
    module: str           # module name, or "" for typed in
    identifier: str       # the file's SHA-256, or the typed-in source text
    path: str             # the file's path as the record names it ("" when typed in)
    calibration_date: str  # last calibration in the history (ISO), or "" when unknown

    def to_dict(self) -> dict[str, Any]:
        return dict(self.__dict__)


@dataclass(frozen=True)
class TermRow:
    measurand: str
    name: str
    contribution: float   # signed c·u in the measurand's unit
    key: str | None       # digest of the term's source identity (see budget.compare.term_key)


@dataclass(frozen=True)
class PreparedRecord:
    file: str
    raw: bytes
    sha256: str
    canonical_sha256: str
    spec_sha256: str
    manifest_sha256: str
    title: str
    chain: str
    date_start: str | None
    date_end: str | None
    pump: str
    operating_point: str
    frequency_Hz: float | None
    measurands: tuple[MeasurandRow, ...]
    calibrations: tuple[CalibrationRow, ...]
    terms: tuple[TermRow, ...]
    #: the stored (zlib-compressed) bytes when prepared ahead, e.g. by a worker process of
    #: ``add_files``; empty: the book compresses ``raw`` as it inserts
    body: bytes = b""
    #: the file's size in bytes when ``raw`` was dropped after compressing (``body`` set)
    size: int = 0


def canonical_json(data: Any) -> bytes:
    """Keys sorted, no whitespace, non-ASCII as \\u escapes: the form whose digest identifies
    a record (ASCII escapes: the standard library's fast path, and one byte form per text)."""
    return json.dumps(data, sort_keys=True, separators=(",", ":"),
                      allow_nan=False).encode("ascii")


def key_digest(key: tuple | None) -> str | None:
    """A short stable text for a term's source identity (None stays None)."""
    return None if key is None else hashlib.sha256(repr(key).encode("utf-8")).hexdigest()[:32]


def parse_measurement_date(text: str) -> tuple[str | None, str | None]:
    """(start, end) as ISO text ("2026-11-17T20:00") from free text; (None, None) if none.

    >>> parse_measurement_date("2026-11-17 20:00 to 23:02")
    ('2026-11-17T20:00', '2026-11-17T23:02')
    """
    m = _DATE.search(text or "")
    if not m:
        return None, None
    start = m.group(1) + (f"T{_pad(m.group(2))}" if m.group(2) else "")
    rest = text[m.end():]
    m2 = _DATE.search(rest)
    if m2:
        end = m2.group(1) + (f"T{_pad(m2.group(2))}" if m2.group(2) else "")
    else:
        t = _TIME.search(rest)
        end = f"{m.group(1)}T{_pad(t.group(1))}" if t else start
    return start, max(start, end)


def _pad(t: str) -> str:
    hh, rest = t.split(":", 1)
    return f"{int(hh):02d}:{rest}"


class StatedDigests:
    """The digests stated beside record files, each folder's ``SHA256SUMS`` and
    ``manifest.json`` read once: adding an exported folder of N records reads its SHA256SUMS
    (N lines) once, not N times. Keep one for one add (a folder's files are taken as they
    were when first looked at)."""

    def __init__(self) -> None:
        self._folders: dict[Path, tuple[dict[str, str], str, dict[str, str], str]] = {}

    def __call__(self, path: Path) -> tuple[str, str] | None:
        """(digest, where) stated for ``path``: its line in SHA256SUMS (the first), else the
        archive manifest's ``record`` entry when it names the file; None when neither does."""
        folder = self._folders.get(path.parent)
        if folder is None:
            folder = self._folders[path.parent] = _read_folder(path.parent)
        sums, sums_where, manifest, manifest_where = folder
        if path.name in sums:
            return sums[path.name], sums_where
        if path.name in manifest:
            return manifest[path.name], manifest_where
        return None


def _read_folder(folder: Path) -> tuple[dict[str, str], str, dict[str, str], str]:
    sums_file, sums = folder / "SHA256SUMS", {}
    if sums_file.is_file():
        for line in sums_file.read_text(encoding="utf-8", errors="replace").splitlines():
            parts = line.strip().split(None, 1)
            if len(parts) == 2:
                sums.setdefault(parts[1].lstrip("*"), parts[0].lower())
    manifest_file, manifest = folder / "manifest.json", {}
    if manifest_file.is_file():
        try:
            m = json.loads(manifest_file.read_text(encoding="utf-8"))
            rec = m.get("record", {}) if isinstance(m, dict) else {}
            if isinstance(rec, dict) and isinstance(rec.get("path"), str) and \
                    isinstance(rec.get("sha256"), str):
                manifest[rec["path"]] = rec["sha256"].lower()
        except (ValueError, OSError):
            pass
    return sums, str(sums_file), manifest, str(manifest_file)


def _check_internal_digests(data: dict[str, Any], file: str) -> None:
    """Each data file's digest is written twice in a record; the two must agree."""
    listed = {}
    for i, f in enumerate(data["run"].get("files", [])):
        if not (isinstance(f, dict) and isinstance(f.get("path"), str)
                and isinstance(f.get("sha256"), str)):
            raise DataError("must be a list of {path, sha256}", file=file,
                            field=f"run.files[{i}]")
        listed[f["path"]] = f["sha256"]
    for i, q in enumerate(data.get("inputs", [])):
        src = q.get("source", {})
        files = src.get("files", []) if isinstance(src, dict) else []
        for j, f in enumerate(files if isinstance(files, list) else []):
            if not isinstance(f, dict):
                continue
            p, h = f.get("path"), f.get("sha256")
            if p in listed and h != listed[p]:
                raise DataError(f"tampered record: digest of {p!r} is {h!r} here but "
                                f"{listed[p]!r} in run.files", file=file,
                                field=f"inputs[{i}].source.files[{j}].sha256")


def _calibrations(b: Budget, data: dict[str, Any]) -> list[CalibrationRow]:
    modules = data["run"].get("modules", {})
    modules = modules if isinstance(modules, dict) else {}
    owner = {}
    for spec_name, m in modules.items():
        if isinstance(m, dict):
            for qn in m.get("quantities", []) or [spec_name]:
                owner[qn] = (spec_name, m)
    out: dict[tuple[str, str], CalibrationRow] = {}
    for q in b.inputs:
        spec_name, m = owner.get(q.name, (q.name, None))
        if m is not None:
            module = str(m.get("module", ""))
            if module not in CALIBRATION_MODULES:
                continue
            diag = m.get("diagnostics", {}) if isinstance(m.get("diagnostics"), dict) else {}
            last = diag.get("last_calibration", "")
            for f in q.provenance.files:
                out.setdefault((spec_name, f.sha256), CalibrationRow(
                    spec_name, "file", module, f.sha256, f.path,
                    str(last)[:10] if isinstance(last, str) else ""))
        elif q.provenance.origin == "spec" and q.standard_uncertainty > 0 and \
                q.evaluation == "B":
            mt = _TYPED.match(q.provenance.method)
            # without a source text the certificate is identified by its numbers
            ident = mt.group(1) if mt else (f"typed in: {q.value!r} ± "
                                            f"{q.standard_uncertainty!r} {q.unit}")
            out.setdefault((q.name, ident), CalibrationRow(q.name, "typed in", "", ident, "", ""))
    return list(out.values())


def _frequency(b: Budget, data: dict[str, Any]) -> float | None:
    """The drive frequency: a frequency module's nominal value, else an input in Hz."""
    for m in (data["run"].get("modules") or {}).values():
        if isinstance(m, dict) and m.get("module") == "frequency":
            nominal = (m.get("diagnostics") or {}).get("nominal_Hz")
            if isinstance(nominal, (int, float)) and not isinstance(nominal, bool):
                return float(nominal)
    for q in b.inputs:
        if q.unit == "Hz":
            return float(q.value)
    return None


def _operating_point(data: dict[str, Any], report: dict[str, Any]) -> str:
    for m in (data["run"].get("modules") or {}).values():
        if isinstance(m, dict) and m.get("module") == "pump":
            d = m.get("diagnostics", {})
            if isinstance(d, dict) and "operating_point" in d:
                return str(d["operating_point"])
    return str(report.get("item_condition", ""))


def prepare(raw: bytes, file: str, *, check_stated: bool = True,
            stated: StatedDigests | None = None) -> PreparedRecord:
    """Check a record file's bytes and extract what the book stores.

    Parameters
    ----------
    raw : bytes
        The record file's content.
    file : str
        Its name (for messages, and to find a ``SHA256SUMS`` or ``manifest.json`` beside it).
    check_stated : bool
        Compare with a digest stated beside the file. Default True.
    stated : StatedDigests, optional
        Where the stated digests are looked up; one shared by the files of one add reads
        each folder once. Default: a new one (the folder is read for this file).

    Raises
    ------
    DataError
        Not a record, another schema version, or a digest that does not match its content.
    """
    sha = hashlib.sha256(raw).hexdigest()
    if check_stated:
        found = (stated or StatedDigests())(Path(file))
        if found is not None and found[0] != sha:
            raise DataError(f"tampered record: its content has SHA-256 {sha[:16]}…, "
                            f"{Path(found[1]).name} states {found[0][:16]}…", file=file,
                            field="sha256")
    data = record_data(raw, file=file)          # checks the record's shape
    _check_internal_digests(data, file)
    b = budget_from_data(data, file)
    run = data["run"]
    report = run.get("report") if isinstance(run.get("report"), dict) else {}
    chain = str(run.get("chain") or report.get("method") or "")
    start, end = parse_measurement_date(str(report.get("measurement_date", "")))
    ms, terms = [], []
    for m in b.measurands:
        ms.append(MeasurandRow(m.name, m.unit, m.value, m.standard_uncertainty,
                               m.expanded_uncertainty, m.coverage_factor))
        for t in m.terms:
            terms.append(TermRow(m.name, t.name, t.sensitivity * t.standard_uncertainty,
                                 key_digest(term_key(b, t))))
    files = run.get("files", [])
    return PreparedRecord(
        file=file, raw=raw, sha256=sha,
        canonical_sha256=hashlib.sha256(canonical_json(
            {**data, "run": {k: v for k, v in run.items() if k != "modules"}})).hexdigest(),
        spec_sha256=str(run.get("spec_sha256", "")),
        manifest_sha256=hashlib.sha256(canonical_json(files)).hexdigest(),
        title=b.title, chain=chain, date_start=start, date_end=end,
        pump=str(report.get("item_serial") or report.get("item") or ""),
        operating_point=_operating_point(data, report), frequency_Hz=_frequency(b, data),
        measurands=tuple(ms), calibrations=tuple(_calibrations(b, data)), terms=tuple(terms))
