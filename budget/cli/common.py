"""What every command shares: the argument parser class, the progress bar, command groups,
argument types, reading input files, evaluating a spec and the archive options.

Exit codes: 0 ok, 1 a check failed, 2 bad input or usage, 130 interrupted (128 + signal).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from ..errors import UsageError
from ..numbers import NumberError, checked, checked_int, shown

EXIT_OK, EXIT_CHECK_FAILED, EXIT_BAD_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130


class Parser(argparse.ArgumentParser):
    """argparse that reports usage errors as one line and exit code 2."""

    def error(self, message: str):  # noqa: D401 - argparse API
        raise UsageError(f"{self.prog}: {message}")


class Progress:
    """A progress bar on stderr for Monte Carlo runs longer than about two seconds."""

    def __init__(self, enabled: bool):
        self.enabled = enabled and sys.stderr.isatty()
        self.start = time.monotonic()
        self.shown = False

    def __call__(self, done: int, total: int) -> None:
        if not self.enabled or time.monotonic() - self.start < 2.0:
            return
        frac = min(done / max(total, 1), 1.0)
        bar = "#" * int(30 * frac)
        self.shown = True  # before writing: a Ctrl-C inside write() must still end the line
        sys.stderr.write(f"\rMonte Carlo [{bar:<30}] {done:>12,} trials")
        sys.stderr.flush()

    def close(self) -> None:
        if self.shown:
            sys.stderr.write("\n")

def add_group(sub, name: str, *, help: str, description: str):
    """Register a command whose work is done by ACTION subcommands (``budget pump fit``);
    without an ACTION it exits 2 with one line naming the actions. Returns the ACTION
    subparsers."""
    p = sub.add_parser(name, help=help, description=description)
    actions = p.add_subparsers(dest=f"{name}_command", metavar="ACTION", parser_class=Parser)
    p.set_defaults(func=cmd_group_missing, group_name=name, group_actions=actions)
    return actions


def cmd_group_missing(args) -> int:
    names = ", ".join(sorted(args.group_actions.choices))
    raise UsageError(f"budget {args.group_name}: an ACTION is missing: give one of {names} "
                     f"(see 'budget {args.group_name} --help')", field="ACTION")


def _int_text(text: str, must: str, lo: int, hi: int) -> int:
    """An integer argument inside [lo, hi] (underscores allowed, at most 40 digits)."""
    t = text.replace("_", "").strip()
    digits = t.lstrip("+-")
    if not digits.isascii() or not digits.isdigit() or len(digits) > 40:
        raise argparse.ArgumentTypeError(f"must be {must}; got {shown(text)}")
    try:
        return checked_int(int(t), lo=lo, hi=hi, must=must)
    except NumberError:
        raise argparse.ArgumentTypeError(f"must be {must}; got {shown(text)}") from None


def trials_arg(text: str):
    if text == "adaptive":
        return None
    return _int_text(text, "an integer or 'adaptive'", -(2 ** 63), 2 ** 63 - 1)


def seed_arg(text: str) -> int:
    # a seed of up to 64 bits: the record keeps it and numpy's generators take it exactly
    return _int_text(text, "a non-negative integer below 2**64", 0, 2 ** 64 - 1)


def int_arg(text: str) -> int:
    """A 64-bit integer argument (counts: --plateau, --samples ...)."""
    return _int_text(text, "an integer", -(2 ** 63), 2 ** 63 - 1)


def evaluate_spec(args):
    from ..engine import evaluate
    from ..spec import load_spec
    spec = load_spec(args.spec)
    progress = Progress(True)
    try:
        trials = getattr(args, "trials", "spec")
        return evaluate(spec, trials=trials, seed=getattr(args, "seed", None),
                        monte_carlo_enabled=False if getattr(args, "no_monte_carlo", False)
                        else None, progress=progress)
    finally:
        progress.close()


def print_warnings(b) -> None:
    """The budget's structured warnings on stderr, after the table (nothing when none)."""
    from ..text import warnings_text
    text = warnings_text(b.warnings)
    if text:
        sys.stdout.flush()  # keep the order table → warnings when both go to one terminal
        print("\n" + text, file=sys.stderr)


def number(text: str) -> float | None:
    """A number argument through the checked conversion (finite float64), else None."""
    try:
        return checked(float(text))
    except (ValueError, OverflowError):  # NumberError is a ValueError
        return None


def positive_float(text: str) -> float:
    v = number(text)
    if v is None or v <= 0:
        raise argparse.ArgumentTypeError(f"must be a number > 0; got {text!r}")
    return v


def finite_float(text: str) -> float:
    v = number(text)
    if v is None:
        raise argparse.ArgumentTypeError(f"must be a finite number; got {text!r}")
    return v


def read_input(path: str, field: str) -> bytes:
    from ..errors import DataError
    try:
        return Path(path).read_bytes()
    except FileNotFoundError:
        raise DataError("file not found", file=path, field=field) from None
    except OSError as exc:
        raise DataError(f"cannot read it ({exc.strerror})", file=path, field=field) from None


def add_archive_options(p) -> None:
    """``--archive DIR`` and ``--force-archive`` (shared by ``run`` and ``report``)."""
    p.add_argument("--archive", metavar="DIR",
                   help="also copy the spec, every input file and the record into DIR, "
                        "content-addressed with a manifest of SHA-256 digests, so the budget "
                        "can be recomputed later (e.g. by verify --inputs DIR)")
    p.add_argument("--force-archive", action="store_true",
                   help="replace an existing archive in DIR")


def check_archive_option(args) -> None:
    """Refuse an unusable --archive folder before any work is done."""
    if getattr(args, "archive", None):
        from ..archive import check_archive_target
        check_archive_target(args.archive, force=args.force_archive)


def stage_archive_option(args, b, out):
    """Stage the ``--archive DIR`` folder in the OutputSet ``out`` (written at its commit);
    returns the ArchiveInfo, or None without --archive."""
    if not getattr(args, "archive", None):
        return None
    from ..archive import build_archive, check_archive_target
    from ..spec import load_spec
    check_archive_target(args.archive, force=args.force_archive)
    spec = load_spec(args.spec)
    return out.folder(args.archive, lambda tmp: build_archive(spec, b, tmp, shown=args.archive))


def archive_message(info) -> str:
    return (f"archive written to {info.path} (spec and {len(info.files)} input file"
            f"{'' if len(info.files) == 1 else 's'})")


def write_outputs(*items: tuple[str, bytes | str], force: bool = False) -> tuple[str, ...]:
    """Write ``(path, data)`` outputs all or none (see :mod:`budget.staging`); ``force``: the
    user's ``--force`` (write through a symbolic link to a file)."""
    from ..staging import OutputSet
    with OutputSet() as out:
        for path, data in items:
            out.file(path, data, force=force)
        return out.commit()


FORCE_HELP = ("write through a symbolic link to a file (its target is replaced, the link "
              "kept); without it such a link is refused")


def add_force_option(p, help: str = FORCE_HELP) -> None:
    """``--force`` of a command that writes files (README "Output files")."""
    p.add_argument("--force", action="store_true", help=help)


def shown_output(name: str) -> str:
    """An output's name in messages: ``-`` is 'standard output'."""
    return "standard output" if name == "-" else name
