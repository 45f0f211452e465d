"""Shared fixtures of the logbook tests: records of the invented season, evaluated once."""

from __future__ import annotations

import base64
import hashlib
import json
import os
from datetime import date, timedelta
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
SEASON = ROOT / "worked_examples" / "season"


def season_records(out: Path, first: int | None = None) -> list[Path]:
    """Evaluate the season's specs (all, or the ``first`` few) into record files in ``out``."""
    from budget import evaluate, load_spec
    out.mkdir(parents=True, exist_ok=True)
    specs = sorted((SEASON / "specs").glob("*.toml"))[:first]
    paths = []
    for spec in specs:
        p = out / (spec.stem + ".json")
        p.write_text(evaluate(load_spec(spec)).to_json(), encoding="utf-8")
        paths.append(p)
    return paths


def variant(src: Path, dst: Path, i: int, pad: int = 0) -> Path:
    """A distinct, valid record: ``src`` with a changed title (a different digest), and with
    ``pad`` bytes of incompressible text in its notes (to make the book's pages spill)."""
    d = json.loads(src.read_text(encoding="utf-8"))
    d["run"]["title"] = f"{d['run'].get('title', '')} (variant {i})"
    # another measurement date too: a copy differing only in its title would be the same
    # measurement (same spec, data files and date), which the book keeps once
    d["run"]["report"]["measurement_date"] = f"{date(2001, 1, 1) + timedelta(days=i)} 18:00"
    if pad:
        d["run"]["notes"] = list(d["run"].get("notes", [])) + [
            base64.b64encode(os.urandom(pad * 3 // 4)).decode("ascii")]
    dst.write_text(json.dumps(d, indent=2, ensure_ascii=False) + "\n", encoding="utf-8")
    return dst


def file_digest(p: Path) -> str:
    return hashlib.sha256(p.read_bytes()).hexdigest()
