"""Evaluate every spec of the invented season into a result record (``make demo`` runs this).

Invented data (see README.md). Each spec is evaluated in-process with the library — the same
code as ``budget run SPEC --json OUT`` (linear propagation; the specs switch Monte Carlo off) —
because 48 separate ``budget run`` commands would each pay the start-up of the program:

    python worked_examples/season/make_records.py OUT_DIR
"""

from __future__ import annotations

import sys
from pathlib import Path

from budget import evaluate, load_spec
from budget.outputs import write_atomic

HERE = Path(__file__).resolve().parent


def make_records(out: Path) -> list[Path]:
    """Write ``out/<spec name>.json`` for every spec in ``specs/``; returns the paths."""
    out.mkdir(parents=True, exist_ok=True)
    paths = []
    for spec in sorted((HERE / "specs").glob("*.toml")):
        b = evaluate(load_spec(spec))
        p = out / (spec.stem + ".json")
        write_atomic(p, b.to_json())
        paths.append(p)
    return paths


if __name__ == "__main__":
    if len(sys.argv) != 2:
        sys.exit("usage: make_records.py OUT_DIR")
    written = make_records(Path(sys.argv[1]))
    sys.stdout.write(f"{len(written)} records written to {sys.argv[1]}\n")
