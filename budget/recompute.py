"""Recomputation: re-run an embedded or archived spec on the files in a folder, compare each
file's digest with the signed manifest and the new record with the old one, byte for byte
(records hold no wall-clock time by design, and the seed is recorded).
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from . import __version__
from .archive import hash_file
from .errors import BudgetError, UsageError
from .record import record_data
from .result import SCHEMA

__all__ = ["recompute", "FileCheck", "RecheckResult"]


@dataclass(frozen=True)
class FileCheck:
    """One input file compared with its manifest entry.

    ``status`` is "same", "changed" or "missing"; ``found`` is None when missing.
    """

    path: str
    expected: str
    found: str | None
    status: str

    def to_dict(self) -> dict[str, Any]:
        return {"path": self.path, "expected": self.expected, "found": self.found,
                "status": self.status}


@dataclass(frozen=True)
class RecheckResult:
    """The result of re-running a spec on a folder of input files.

    Attributes
    ----------
    files : tuple of FileCheck
        Each manifest file, in manifest order.
    record_identical : bool
        Whether the recomputed record equals the original byte for byte.
    differences : tuple of str
        Where the records differ (JSON paths with both values), at most a few.
    problems : tuple of str
        Everything that failed, as sentences; empty when all is well.
    older_format : str
        The signed record's format when it is an older one than this version writes (the
        spec is then not re-run: its bytes could not be reproduced); "" otherwise.
    """

    files: tuple[FileCheck, ...]
    record_identical: bool
    differences: tuple[str, ...]
    problems: tuple[str, ...]
    older_format: str = ""

    @property
    def ok(self) -> bool:
        return not self.problems

    def to_dict(self) -> dict[str, Any]:
        return {"files": [f.to_dict() for f in self.files],
                "record_identical": self.record_identical,
                "differences": list(self.differences), "problems": list(self.problems),
                "older_format": self.older_format}


def _diff(a: Any, b: Any, path: str, out: list[str], limit: int = 6) -> None:
    if len(out) >= limit or a == b:
        return
    if isinstance(a, dict) and isinstance(b, dict):
        for k in list(a) + [k for k in b if k not in a]:
            if k not in a or k not in b:
                out.append(f"{path}.{k}: only in the {'recomputed' if k in b else 'original'} "
                           "record")
            else:
                _diff(a[k], b[k], f"{path}.{k}", out, limit)
            if len(out) >= limit:
                return
        if list(a) != list(b) and len(out) < limit and set(a) == set(b):
            out.append(f"{path}: keys in another order")
        return
    if isinstance(a, list) and isinstance(b, list) and len(a) == len(b):
        for i, (x, y) in enumerate(zip(a, b)):
            _diff(x, y, f"{path}[{i}]", out, limit)
        return
    out.append(f"{path}: {_short(a)} originally, {_short(b)} now")


def _short(v: Any) -> str:
    s = json.dumps(v, ensure_ascii=False)
    return s if len(s) <= 60 else s[:57] + "..."


def recompute(spec_bytes: bytes, record_json: str, manifest: dict[str, Any],
              inputs_dir: str | Path) -> RecheckResult:
    """Re-run a spec on the files in ``inputs_dir`` and compare with the original record.

    Parameters
    ----------
    spec_bytes : bytes
        The spec, exactly as it was evaluated.
    record_json : str
        The original record.
    manifest : dict
        The input manifest (:func:`input_manifest`, or an archive's manifest).
    inputs_dir : str or Path
        Folder standing for the spec's folder: relative data-file paths resolve against it.

    The run uses the original seed, trial setting, sampling and Monte Carlo switch from the
    record. A record of an older format (:data:`budget.result.OLDER_SCHEMAS`) is not re-run:
    its file digests are still compared, and a problem says that its bytes cannot be
    reproduced by this version. A
    spec or data problem during the run is reported as a problem, not raised: for a verifier
    it is a failed check.
    """
    from .engine import evaluate  # the recomputation needs the whole engine; load it late
    from .spec import parse_spec

    folder = Path(inputs_dir)
    if not folder.is_dir():
        raise UsageError("is not a folder", file=str(inputs_dir), field="--inputs")
    problems: list[str] = []
    checks = []
    for f in manifest.get("files", []):
        rel = str(f.get("path", ""))
        p = Path(rel)
        p = p if p.is_absolute() else folder / p
        got = hash_file(p) if p.is_file() else None
        status = "missing" if got is None else ("same" if got == f.get("sha256") else "changed")
        checks.append(FileCheck(path=rel, expected=str(f.get("sha256")), found=got,
                                status=status))
        if status == "missing":
            problems.append(f"input file {rel} is missing from {folder}")
        elif status == "changed":
            problems.append(f"input file {rel} has changed (sha256 {got}, signed "
                            f"{f.get('sha256')})")
    rec = record_data(record_json, file="record")
    run = rec["run"]
    if rec["schema"] != SCHEMA:
        # an older format: this version writes other bytes for the same inputs, so a byte
        # comparison would report a confusing mismatch; say why it cannot be compared instead
        problems.append(f"the signed record was written in the older record format "
                        f"{rec['schema']} (by {run.get('software') or 'an older version'}; "
                        f"this version writes {SCHEMA}), so a recompute cannot be compared "
                        "with it byte for byte; re-verify the inputs with the version that "
                        "wrote it")
        return RecheckResult(tuple(checks), False, (), tuple(problems),
                             older_format=str(rec["schema"]))
    spec_name = (manifest.get("spec") or {}).get("file") or \
        (manifest.get("spec") or {}).get("path") or run.get("spec_file") or "spec.toml"
    differences: list[str] = []
    identical = False
    try:
        text = spec_bytes.decode("utf-8-sig")
    except UnicodeDecodeError:
        problems.append("the embedded spec is not UTF-8 text")
        return RecheckResult(tuple(checks), False, (), tuple(problems))
    trials = run.get("trials_setting", "spec")
    trials = None if trials == "adaptive" else trials
    try:
        spec = parse_spec(text, file=spec_name, folder=folder.resolve(), raw=spec_bytes)
        # the record's own sampling (records from before the option were pseudo-random)
        budget = evaluate(spec, trials=trials, seed=run.get("seed"),
                          monte_carlo_enabled=run.get("monte_carlo_enabled"),
                          sampling=run.get("sampling") if run.get("sampling") in
                          ("random", "sobol") else "random")
        new = budget.to_json()
    except BudgetError as exc:
        problems.append(f"the spec could not be re-run on {folder}: {exc.one_line()}")
        return RecheckResult(tuple(checks), False, (), tuple(problems))
    identical = new == record_json
    if not identical:
        _diff(rec, json.loads(new), "record", differences)
        if not differences:
            differences.append("record: same content, different bytes")
        soft = run.get("software")
        note = "" if soft == f"qcs-budget {__version__}" else \
            f" (recorded with {soft}, recomputed with qcs-budget {__version__})"
        problems.append("the recomputed record differs from the signed one" + note + ": " +
                        "; ".join(differences))
    return RecheckResult(tuple(checks), identical, tuple(differences), tuple(problems))
