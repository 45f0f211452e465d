"""The demo behind ``make demo``: the whole job on the invented scenario, step by step.

Every scenario here is invented (see each folder's README); the numbers are not measurements.
The demo approver identity is created with a passphrase that the demo itself sets — acceptable
only because the identity is a throw-away for the demonstration; a real approver keeps theirs
secret (``budget identity create`` asks for it when BUDGET_PASSPHRASE is not set).

The steps that share no files run in two processes when a CPU is idle (:data:`WORKER_STEPS` in
a forked second one), and their output is written in step order, so the terminal shows what a
run one after the other shows; ``--one-process`` runs them one after the other.
"""

from __future__ import annotations

import contextlib
import io
import json
import os
import shutil
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
OUT = ROOT / "demo-output"
EX = ROOT / "worked_examples"
DEMO_PASSPHRASE = "invented-demo-approver"  # demonstration only; see the module docstring
sys.path.insert(0, str(ROOT))   # the package of this tree, as 'python -m budget' run here uses


def rel(p: Path | str) -> str:
    return str(p).replace(str(ROOT) + "/", "")


def budget(*args, quiet: bool = False) -> None:
    """Run one ``budget`` command, echoing it; stop the demo if it fails.

    The command runs in this process (``budget.cli.main``, exactly what ``python -m budget``
    calls), so numpy, scipy, matplotlib and WeasyPrint are imported once for the whole demo
    instead of once per command; ``quiet`` keeps its output and shows the last three lines.
    """
    import contextlib
    import io

    from budget.cli import main as budget_main
    shown = " ".join(rel(a) for a in args)
    print(f"$ budget {shown}", flush=True)
    out, err = io.StringIO(), io.StringIO()
    with contextlib.ExitStack() as stack:
        if quiet:
            stack.enter_context(contextlib.redirect_stdout(out))
            stack.enter_context(contextlib.redirect_stderr(err))
        code = budget_main([str(a) for a in args])
    sys.stdout.flush()
    if code != 0:
        if quiet:
            sys.stdout.write(out.getvalue())
            sys.stderr.write(err.getvalue())
        sys.exit(f"demo stopped: 'budget {shown}' exited with {code}")
    if quiet:
        tail = [ln for ln in out.getvalue().splitlines() if ln.strip()][-3:]
        for ln in tail:
            print(f"    {ln}")


def season(book: Path) -> None:
    """The invented season (worked_examples/season): 48 records evaluated in one process, added
    to a fresh book, the trend page written; the trend must flag the invented resistor
    recalibration (:func:`season_flag`; the demo stops otherwise)."""
    records = OUT / "season"
    print(f"$ python {rel(EX / 'season' / 'make_records.py')} {rel(records)}", flush=True)
    sys.path.insert(0, str(EX / "season"))
    from make_records import make_records  # the script's own function, in this process
    written = make_records(records)
    print(f"{len(written)} records written to {records}")
    budget("logbook", "add", *sorted(records.glob("*.json")), "--book", book, quiet=True)
    budget("logbook", "trend", "--book", book, "--pdf", OUT / "trend.pdf", "--json",
           OUT / "trend.json", quiet=True)
    season_flag()


def season_flag() -> str:
    """The step flag of the season's trend (``trend.json``) that names the invented resistor
    recalibration; the demo stops when there is none."""
    truth = json.loads((EX / "season" / "truth.json").read_text(encoding="utf-8"))
    trend = json.loads((OUT / "trend.json").read_text(encoding="utf-8"))
    named = truth["resistor_certificate_after"][1]
    steps = [f for f in trend["flags"] if f["kind"] == "step"
             and any(c["identifier"] == named for c in f["calibrations"])]
    if not steps:
        sys.exit(f"demo stopped: the trend did not flag the invented recalibration ({named})")
    f = steps[0]
    return (f"{f['chain']} stepped at the recalibration “{named}”: E_n = {f['value']:.1f} "
            f"(the invented hidden error of 0.7 µA/A) → {rel(OUT / 'trend.pdf')}")


#: Steps run in a second process while this one runs the others (they share no files): the
#: pump fits, the three runs with the amplifier chain and their comparison, and the season.
#: The validation and the resistor-chain record with its report, signatures and check stay
#: here (the two halves take about the same CPU time).
WORKER_STEPS = (2, 7, 8, 9)


class _Tape(io.TextIOBase):
    """Keeps what a step writes to stdout (1) or stderr (2), in order, to be written later."""

    def __init__(self, chunks: list, fd: int):
        super().__init__()
        self._chunks, self._fd = chunks, fd

    @property
    def encoding(self) -> str:
        return "utf-8"

    def writable(self) -> bool:
        return True

    def isatty(self) -> bool:
        return False   # no progress bar: its carriage returns would be replayed as text

    def write(self, text: str) -> int:
        self._chunks.append((self._fd, text))
        return len(text)


def _taped(step) -> tuple[list, object]:
    """Run one step with its output kept: (chunks, None) or (chunks, exit message)."""
    chunks: list = []
    with contextlib.redirect_stdout(_Tape(chunks, 1)), \
            contextlib.redirect_stderr(_Tape(chunks, 2)):
        try:
            step()
        except SystemExit as exc:   # budget() stops the demo with sys.exit(message)
            return chunks, exc.code if exc.code is not None else 1
    return chunks, None


def _play(chunks: list) -> None:
    for fd, text in chunks:
        (sys.stdout if fd == 1 else sys.stderr).write(text)
    sys.stdout.flush()
    sys.stderr.flush()


def _worker(queue, work: dict, numbers) -> None:
    for i in numbers:
        chunks, stop = _taped(work[i])
        queue.put((i, chunks, stop))
        if stop is not None:
            return


def _idle_cpus() -> float:
    """CPUs not busy: the CPU count less the 1-minute load average (0 where unknown)."""
    try:
        return (os.cpu_count() or 1) - os.getloadavg()[0]
    except (OSError, AttributeError):   # no load average (Windows)
        return 0.0


def run_steps(work: dict, in_worker) -> None:
    """Run the numbered steps, those in ``in_worker`` in a forked second process, and write
    every step's output in step order, as a run one after the other would.

    The two halves share no files (each step reads only what an earlier step of its own half
    wrote), so the files written are the same; a step's stdout and stderr keep their streams
    and their order. Where ``fork`` is not available, or on one CPU, the steps run one after
    the other in this process (and with an empty ``in_worker``: ``--one-process``), and so
    they do when no CPU is idle (CPU count less the 1-minute load average below 1): on a
    machine shared with other jobs the kernel gives one session's processes one share
    (autogroup scheduling), and two processes measured slower there than one
    (benchmarks/README.md).
    """
    import multiprocessing as mp
    if not in_worker or "fork" not in mp.get_all_start_methods() or _idle_cpus() < 1:
        for i in sorted(work):
            work[i]()
        return
    import queue as queues

    # imported once here and shared by both processes (each would import them otherwise)
    import matplotlib.figure  # noqa: F401
    import weasyprint  # noqa: F401

    import budget.cli  # noqa: F401
    import budget.engine  # noqa: F401
    import budget.inputs.cycles  # noqa: F401
    import budget.report.render  # noqa: F401
    ctx = mp.get_context("fork")
    queue = ctx.Queue()
    theirs = [i for i in sorted(work) if i in in_worker]
    sys.stdout.flush()   # nothing buffered may be written twice (the child flushes at exit)
    sys.stderr.flush()
    child = ctx.Process(target=_worker, args=(queue, work, theirs))
    child.start()
    done: dict = {}
    nxt = min(work)

    def receive(timeout: float | None) -> bool:
        try:
            i, chunks, stop = queue.get(timeout=timeout) if timeout else queue.get_nowait()
        except queues.Empty:
            return False
        done[i] = (chunks, stop)
        return True

    def show() -> int:
        n = nxt
        while n in done:
            chunks, stop = done.pop(n)
            _play(chunks)
            if stop is not None:
                sys.exit(stop)
            n += 1
        return n

    try:
        for i in sorted(work):
            if i in in_worker:
                continue
            done[i] = _taped(work[i])
            while receive(None):
                pass
            nxt = show()
        while nxt <= max(work):
            if not receive(1.0) and nxt not in done and not child.is_alive() \
                    and not receive(None):
                sys.exit("demo stopped: the worker process ended unexpectedly")
            nxt = show()
    finally:
        if child.is_alive() and nxt <= max(work):   # stopped early: leave no worker behind
            child.terminate()
        child.join()


def main(argv: list[str] | None = None) -> None:
    import argparse
    ap = argparse.ArgumentParser(description="The demo behind 'make demo' (invented data).")
    ap.add_argument("--one-process", action="store_true",
                    help="run every step in this process, one after the other (by default "
                         "the independent steps run in a second, forked process)")
    one_process = ap.parse_args(argv).one_process
    start = time.monotonic()
    os.chdir(ROOT)
    os.environ["BUDGET_PASSPHRASE"] = DEMO_PASSPHRASE   # demonstration only (docstring)
    if OUT.exists():
        shutil.rmtree(OUT)
    (OUT / "pump").mkdir(parents=True)
    rc, runs = EX / "resistor_chain", EX / "runs"
    pc = EX / "pump_characterisation"
    steps = [
        ("check the engine against the published reference examples",
         [("validate", "--json", OUT / "validation.json")], True),
        ("fit the pump's plateau scan (decay cascade) and its escape record",
         [("pump", "fit", pc / "plateau_scan.csv", "--model", "decay-cascade",
           "--operating-point", "-0.558", "--temperatures", pc / "thermal_rates.csv",
           "--figures", OUT / "pump", "--write-fit", OUT / "pump" / "plateau-fit.toml"),
          ("pump", "fit", pc / "escape_record.csv", "--model", "sequential-escape",
           "--plateau", "2", "--operating-point", "-0.30", "--hold-time", "2.5e-7")], True),
        ("evaluate the resistor-chain budget of the 10-hour on/off run",
         [("run", rc / "spec.toml", "--json", OUT / "result.json")], False),
        ("write the budget report and the certificate draft",
         [("report", "--record", OUT / "result.json", "-o", OUT / "report.pdf"),
          ("report", "--record", OUT / "result.json", "--certificate",
           "-o", OUT / "certificate-draft.pdf")], False),
        ("create a demo approver identity and sign",
         [("identity", "create", "--name", "Tomas Ferrand (invented)", "--role",
           "head of the electrical quantum standards section", "--out", OUT / "approver"),
          ("sign", OUT / "report.pdf", "--identity", OUT / "approver" / "identity.p12",
           "--record", OUT / "result.json", "--spec", rc / "spec.toml",
           "--reason", "budget report approved", "-o", OUT / "report-signed.pdf"),
          # the draft carries its record (made with --record): only the spec is given
          ("sign", OUT / "certificate-draft.pdf", "--identity", OUT / "approver" / "identity.p12",
           "--spec", rc / "spec.toml",
           "--reason", "certificate approved", "-o", OUT / "certificate-signed.pdf")], False),
        ("verify the signed report and re-check it against its input files",
         [("verify", OUT / "report-signed.pdf", "--trust", OUT / "approver" / "identity.pem",
           "--inputs", rc)], False),
        ("evaluate three runs of the same pump and the amplifier chain",
         [("run", runs / f"run_{x}.toml", "--json", OUT / f"run_{x}.json") for x in "abc"]
         + [("run", EX / "amplifier_chain" / "spec.toml", "--json", OUT / "amplifier.json")],
         True),
        ("compare the runs with each other and with the amplifier chain",
         [("compare", *(OUT / f"run_{x}.json" for x in "abc"), "--reference",
           OUT / "amplifier.json", "--pairwise", "--pdf", OUT / "compare.pdf")], False),
    ]
    total = len(steps) + 1

    def command_step(i: int, what: str, commands, quiet: bool):
        def step() -> None:
            print(f"\n[{i}/{total}] {what}", flush=True)
            for args in commands:
                budget(*args, quiet=quiet)
        return step

    def season_step() -> None:
        print(f"\n[{total}/{total}] keep a year of invented runs in the logbook and watch the "
              "trend", flush=True)
        season(OUT / "logbook.sqlite")

    work = {i: command_step(i, *s) for i, s in enumerate(steps, start=1)}
    work[total] = season_step
    run_steps(work, () if one_process else WORKER_STEPS)

    # the record stores SI numbers with the display unit beside them; reading it through the
    # library shows them in that unit (formatting the raw JSON as ppm printed 0.00)
    from budget.measurands import default_measurand
    from budget.record import load_record
    ms = load_record(OUT / "result.json").measurands
    main = default_measurand([m.name for m in ms])
    dev = next(m for m in ms if m.name == main)
    print("\n" + "=" * 72)
    print(f"Demo finished in {time.monotonic() - start:.0f} s. Written under {rel(OUT)}/:")
    for p in sorted(OUT.rglob("*")):
        if p.is_file():
            print(f"  {rel(p)}")
    print(f"\nHeadline (invented data): relative deviation from n·e·f = "
          f"{dev.value:+.2f} {dev.unit} with expanded uncertainty U = "
          f"{dev.expanded_uncertainty:.2f} {dev.unit} (k = {dev.coverage_factor:.2f}, "
          f"p ≈ {100 * dev.coverage_probability:g} %)")
    print(f"Logbook (invented season): {season_flag()}")
    print("The signed documents are demonstrations: a real certificate is reviewed and "
          "authorised under the laboratory's own quality procedures.")


if __name__ == "__main__":
    main()
