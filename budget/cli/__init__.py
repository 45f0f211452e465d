"""The ``budget`` command: a thin layer over the library.

The only package that imports argparse or prints. Each command parses its arguments, calls one
library function, prints, and maps errors to exit codes: 0 ok, 1 a check failed, 2 bad input or
usage (one line on stderr naming file, line or row, and field; no traceback; nothing written).

One module per command group (``run``, ``report``, ``explain``, ``pump``, ``evidence``, ``logbook``);
what they share (parser class, progress bar, argument types, error mapping) is in
:mod:`budget.cli.common` and here. Adding a command: in its group's module write
``add_NAME(sub)`` that registers the subparser with ``set_defaults(func=_cmd_NAME)`` and
``_cmd_NAME(args) -> int``, and list ``add_NAME`` in :data:`COMMANDS`. The text a command shows is built by a renderer in :mod:`budget.text`, which
returns a string; this module only prints it.
"""

from __future__ import annotations

import argparse
import sys

from .. import __version__
from ..errors import BudgetError, UsageError
from .common import EXIT_BAD_INPUT, EXIT_INTERRUPTED, EXIT_OK, Parser
from .evidence import add_identity, add_sign, add_verify
from .explain import add_compare, add_explain
from .logbook import add_logbook
from .pump import add_pump
from .report import add_report
from .run import add_run, add_validate

__all__ = ["main", "build_parser", "COMMANDS"]

COMMANDS = [add_run, add_validate, add_explain, add_compare, add_pump,
            add_identity, add_sign, add_verify, add_report, add_logbook]


def build_parser() -> argparse.ArgumentParser:
    parser = Parser(prog="budget", description="Uncertainty budgets (JCGM 100 / JCGM 101) for "
                     "quantized current sources: run a budget spec, validate against published "
                     "examples, report, explain, compare.")
    parser.add_argument("--version", action="version", version=f"qcs-budget {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=Parser)
    for add in COMMANDS:
        add(sub)
    return parser


class _Terminated(KeyboardInterrupt):
    """SIGTERM or SIGHUP, turned into the same clean stop as Ctrl-C (SIGINT): the exception
    unwinds through every ``write_atomic`` and archive build, which remove their temporary
    files, so an interrupted run leaves no partial output."""

    def __init__(self, signum: int):
        super().__init__(signum)
        self.signum = signum


def _on_terminate(signum, frame):
    raise _Terminated(signum)


def _install_stop_handlers() -> dict:
    import signal
    previous = {}
    for name in ("SIGTERM", "SIGHUP"):
        sig = getattr(signal, name, None)
        if sig is None:  # pragma: no cover - Windows has no SIGHUP
            continue
        try:
            previous[sig] = signal.signal(sig, _on_terminate)
        except (ValueError, OSError):  # not the main thread (e.g. main() called from a worker)
            pass
    return previous


def _restore_stop_handlers(previous: dict) -> None:
    import signal
    for sig, handler in previous.items():
        signal.signal(sig, handler)


def _os_error_line(exc: OSError) -> str:
    """An OS error on any path (name too long, permission denied, disk full ...) as one line."""
    from ..errors import BudgetError as _Located
    what = exc.strerror or type(exc).__name__
    return _Located(f"cannot use this path: {what}", file=exc.filename).one_line()


def _show_numeric_warnings(caught) -> None:
    """Warnings raised by numerical libraries during a command that succeeded, as the project's
    one-line warnings (never the libraries' raw two-line text)."""
    from ..numbers import escape
    seen = set()
    for w in caught:
        text = escape(" ".join(str(w.message).split()))
        if text in seen:
            continue
        seen.add(text)
        kind = "numerical" if issubclass(w.category, RuntimeWarning) else w.category.__name__
        print(f"budget: warning: {kind}: {text} (a library reported it while computing; "
              "check the inputs' magnitudes)", file=sys.stderr)


OUTPUT_OPTIONS = ("json", "output", "html", "pdf", "write_fit")  # file outputs of any command


def _run_command(args) -> int:
    """Run the command; when one of its outputs is standard output (``-``, ``/dev/stdout``,
    the pipe stdout is), the text it would print goes to stderr, so stdout carries only that
    output (``budget run S --json - | jq .``)."""
    import contextlib

    from ..outputs import on_stdout, set_stdout
    piped = [f"--{o.replace('_', '-')}" for o in OUTPUT_OPTIONS
             if on_stdout(getattr(args, o, None))]
    if len(piped) > 1:
        raise UsageError(f"{' and '.join(piped)} both go to standard output; only one can",
                         field=piped[1])
    if not piped:
        return args.func(args)
    set_stdout(sys.stdout)
    try:
        with contextlib.redirect_stdout(sys.stderr):
            return args.func(args)
    finally:
        set_stdout(None)


def main(argv: list[str] | None = None) -> int:
    import warnings

    from ..staging import reset_committed
    reset_committed()
    previous = _install_stop_handlers()
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("default")
            warnings.simplefilter("ignore", DeprecationWarning)
            warnings.simplefilter("ignore", PendingDeprecationWarning)
            parser = build_parser()
            args = parser.parse_args(argv)
            if not getattr(args, "func", None):
                raise UsageError("budget: a command is required (see 'budget --help')")
            code = _run_command(args)
        _show_numeric_warnings(caught)
        return code
    except BudgetError as exc:
        print(f"budget: error: {exc.one_line()}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except BrokenPipeError:  # pragma: no cover - e.g. piped into head
        return EXIT_OK
    except OSError as exc:
        print(f"budget: error: {_os_error_line(exc)}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt as exc:
        from ..staging import committed
        what = "terminated" if isinstance(exc, _Terminated) else "interrupted"
        done = committed()
        # the outputs are committed together (budget.staging): a stop comes either before
        # the commit (nothing written) or after it (every output complete)
        print(f"budget: {what}; " + (f"after the outputs were complete: {', '.join(done)} "
                                     "written" if done else "no output written"),
              file=sys.stderr)
        # 128 + signal number, the shell's convention (130 for SIGINT, 143 for SIGTERM)
        return 128 + exc.signum if isinstance(exc, _Terminated) else EXIT_INTERRUPTED
    finally:
        _restore_stop_handlers(previous)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
