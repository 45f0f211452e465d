"""The demo behind ``make demo``: runs the invented worked examples through the ``budget``
command, step by step, and writes everything under ``demo-output/``.

Every scenario here is invented (see each folder's README); the numbers are not measurements.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
OUT = ROOT / "demo-output"
EX = ROOT / "worked_examples"


def budget(*args: str) -> None:
    """Run one ``budget`` command, echoing it, and stop the demo if it fails."""
    shown = " ".join(str(a).replace(str(ROOT) + "/", "") for a in args)
    print(f"\n$ budget {shown}", flush=True)
    rc = subprocess.call([sys.executable, "-m", "budget", *map(str, args)], cwd=ROOT)
    if rc != 0:
        sys.exit(f"demo stopped: 'budget {shown}' exited with {rc}")


def main() -> None:
    if OUT.exists():
        shutil.rmtree(OUT)
    OUT.mkdir()
    steps = [
        ("validate the engine against the published reference examples", ("validate",)),
        ("a typed-in resistor-chain budget with rectangular and correlated inputs",
         ("run", EX / "typed_in_budget" / "spec.toml", "--json", OUT / "result.json")),
    ]
    for i, (what, args) in enumerate(steps, start=1):
        print(f"\n[{i}/{len(steps)}] {what}", flush=True)
        budget(*args)
    print("\nWritten:")
    for p in sorted(OUT.iterdir()):
        print(f"  {p.relative_to(ROOT)}")


if __name__ == "__main__":
    main()
