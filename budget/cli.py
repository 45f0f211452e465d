"""The ``budget`` command: a thin layer over the library.

The only module that imports argparse or prints. Each command parses its arguments, calls one
library function, prints, and maps errors to exit codes: 0 ok, 1 a check failed, 2 bad input or
usage (one line on stderr naming file, line or row, and field; no traceback; nothing written).

Adding a command: write ``_add_NAME(sub)`` that registers the subparser with
``set_defaults(func=_cmd_NAME)``, write ``_cmd_NAME(args) -> int``, and list ``_add_NAME`` in
:data:`COMMANDS`.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import time
from pathlib import Path

from . import __version__
from .errors import BudgetError, UsageError
from .fmt import fmt_dof, fmt_num, fmt_share, fmt_u, fmt_value

EXIT_OK, EXIT_CHECK_FAILED, EXIT_BAD_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage errors as one line and exit code 2."""

    def error(self, message: str):  # noqa: D401 - argparse API
        raise UsageError(f"{self.prog}: {message}")


# --------------------------------------------------------------------------- progress
class _Progress:
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
        sys.stderr.write(f"\rMonte Carlo [{bar:<30}] {done:>12,} trials")
        sys.stderr.flush()
        self.shown = True

    def close(self) -> None:
        if self.shown:
            sys.stderr.write("\n")


# --------------------------------------------------------------------------- tables
def _table(headers: list[str], rows: list[list[str]], right: set[int] | None = None) -> str:
    right = right if right is not None else set(range(1, len(headers)))
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h)
              for i, h in enumerate(headers)]

    def line(cells):
        return "  ".join(c.rjust(w) if i in right else c.ljust(w)
                         for i, (c, w) in enumerate(zip(cells, widths)))
    out = [line(headers), "  ".join("-" * w for w in widths)]
    out += [line(r) for r in rows]
    return "\n".join(out)


def budget_text(b) -> str:
    """The budget table(s) and result lines of a Budget, as printed by ``budget run``."""
    out = [b.title, "=" * len(b.title)]
    for m in b.measurands:
        unit = f" {m.unit}" if m.unit else ""
        out.append("")
        out.append(f"{m.name} = {m.expression}")
        rows = []
        for t in sorted(m.terms, key=lambda t: -t.variance_share):
            rows.append([t.name, fmt_value(t.value, t.standard_uncertainty) + (f" {t.unit}" if t.unit not in ("", "1") else ""),
                         fmt_u(t.standard_uncertainty), t.distribution, fmt_dof(t.dof),
                         fmt_num(t.sensitivity, 4), fmt_u(t.contribution), fmt_share(t.variance_share)])
        out.append(_table(["input", "estimate", "u(x)", "distribution", "ν", "c", "|c·u|",
                           "share of u_c²"], rows))
        out.append("")
        p = m.coverage_probability
        out.append(f"  {m.name} = {fmt_value(m.value, m.standard_uncertainty)}{unit}, "
                   f"u_c = {fmt_u(m.standard_uncertainty)}{unit}, ν_eff = {fmt_dof(m.effective_dof)}")
        out.append(f"  result: {m.name} = ({fmt_value(m.value, m.expanded_uncertainty)} ± "
                   f"{fmt_u(m.expanded_uncertainty)}){unit}, U with k = {m.coverage_factor:.2f} "
                   f"for a coverage probability of about {100 * p:g} %")
        if m.second_order_variance:
            out.append(f"  includes second-order terms: {fmt_u(math.sqrt(abs(m.second_order_variance)))}"
                       f"{unit} in quadrature")
        mc = b.mc(m.name)
        if mc is not None:
            verdict = "validated" if mc.validated else "NOT validated"
            out.append(f"  Monte Carlo ({mc.trials:,} trials{', adaptive' if mc.adaptive else ''}): "
                       f"y = {fmt_value(mc.value, mc.standard_uncertainty)}, "
                       f"u = {fmt_u(mc.standard_uncertainty)}, {100 * p:g} % {mc.interval_kind} "
                       f"interval [{fmt_value(mc.interval_low, mc.standard_uncertainty)}, "
                       f"{fmt_value(mc.interval_high, mc.standard_uncertainty)}]")
            out.append(f"  linear result {verdict} (JCGM 101 §8: d_low = {fmt_num(mc.d_low, 2)}, "
                       f"d_high = {fmt_num(mc.d_high, 2)}, δ = {fmt_num(mc.tolerance, 2)})")
    for note in b.run.get("notes", []):
        out.append(f"note: {note}")
    return "\n".join(out)


# --------------------------------------------------------------------------- run
def _add_run(sub) -> None:
    p = sub.add_parser("run", help="evaluate a budget spec and print its budget table",
                       description="Evaluate a budget spec (TOML): GUM law of propagation and "
                                   "the JCGM 101 Monte Carlo check. Prints the budget table; "
                                   "--json writes the result record.")
    p.add_argument("spec", help="budget spec file (TOML)")
    p.add_argument("--json", metavar="OUT", help="write the result record (JSON) to OUT")
    p.add_argument("--trials", type=_trials, metavar="N", default=argparse.SUPPRESS,
                   help="Monte Carlo trials (integer or 'adaptive'); overrides the spec")
    p.add_argument("--seed", type=_seed, metavar="S", help="random seed; overrides the spec")
    p.add_argument("--no-monte-carlo", action="store_true", help="skip the Monte Carlo method")
    p.set_defaults(func=_cmd_run)


def _trials(text: str):
    if text == "adaptive":
        return None
    try:
        return int(text.replace("_", ""))
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be an integer or 'adaptive'; got {text!r}") from None


def _seed(text: str) -> int:
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a non-negative integer; got {text!r}") from None
    if v < 0:
        raise argparse.ArgumentTypeError(f"must be a non-negative integer; got {text!r}")
    return v


def _evaluate_spec(args):
    from .engine import evaluate
    from .spec import load_spec
    spec = load_spec(args.spec)
    progress = _Progress(True)
    try:
        trials = getattr(args, "trials", "spec")
        return evaluate(spec, trials=trials, seed=getattr(args, "seed", None),
                        monte_carlo_enabled=False if getattr(args, "no_monte_carlo", False)
                        else None, progress=progress)
    finally:
        progress.close()


def _cmd_run(args) -> int:
    from .outputs import check_writable, write_atomic
    if args.json:
        check_writable(args.json)
    b = _evaluate_spec(args)
    print(budget_text(b))
    if args.json:
        write_atomic(args.json, b.to_json())
        print(f"\nrecord written to {args.json}")
    return EXIT_OK


# --------------------------------------------------------------------------- validate
def _add_validate(sub) -> None:
    p = sub.add_parser("validate", help="reproduce the published reference examples",
                       description="Run the built-in reference cases (GUM H.2 and H.3, "
                                   "EA-4/02 S3, JCGM 101 §9.2, GUM Table G.2, SI constants) "
                                   "and compare each computed number with the published one. "
                                   "Exit 0 only if every check passes.")
    p.add_argument("--json", metavar="OUT", help="write the checks as JSON to OUT")
    p.set_defaults(func=_cmd_validate)


def _cmd_validate(args) -> int:
    from .outputs import check_writable, write_atomic
    from .references import run_all
    if args.json:
        check_writable(args.json)
    checks = run_all()
    rows = [[c.case, c.quantity, f"{c.published:.10g}", f"{c.computed:.10g}",
             f"{c.tolerance:.2g}", "pass" if c.passed else "FAIL"] for c in checks]
    print(_table(["case", "quantity", "published", "computed", "tolerance", "result"], rows,
                 right={2, 3, 4}))
    print()
    for src in dict.fromkeys(f"{c.case}: {c.source}" for c in checks):
        print(f"source  {src}")
    failed = [c for c in checks if not c.passed]
    print(f"\n{len(checks) - len(failed)} of {len(checks)} checks passed")
    if args.json:
        write_atomic(args.json, json.dumps([c.to_dict() for c in checks], indent=2,
                                           ensure_ascii=False) + "\n")
    return EXIT_CHECK_FAILED if failed else EXIT_OK


# --------------------------------------------------------------------------- main
COMMANDS = [_add_run, _add_validate]


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="budget", description="Uncertainty budgets (JCGM 100 / JCGM 101) for "
                     "quantized current sources: run a budget spec, validate against published "
                     "examples, report, explain, compare.")
    parser.add_argument("--version", action="version", version=f"qcs-budget {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for add in COMMANDS:
        add(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
        if not getattr(args, "func", None):
            parser.print_help()
            return EXIT_BAD_INPUT
        return args.func(args)
    except BudgetError as exc:
        print(f"budget: error: {exc.one_line()}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("budget: interrupted; no output written", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:  # pragma: no cover - e.g. piped into head
        return EXIT_OK


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
