"""The ``budget`` command: a thin layer over the library.

The only module that imports argparse or prints. Each command parses its arguments, calls one
library function, prints, and maps errors to exit codes: 0 ok, 1 a check failed, 2 bad input or
usage (one line on stderr naming file, line or row, and field; no traceback; nothing written).

Adding a command: write ``_add_NAME(sub)`` that registers the subparser with
``set_defaults(func=_cmd_NAME)``, write ``_cmd_NAME(args) -> int``, and list ``_add_NAME`` in
:data:`COMMANDS`. The text a command shows is built by a renderer in :mod:`budget.text`, which
returns a string; this module only prints it.
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
        self.shown = True  # before writing: a Ctrl-C inside write() must still end the line
        sys.stderr.write(f"\rMonte Carlo [{bar:<30}] {done:>12,} trials")
        sys.stderr.flush()

    def close(self) -> None:
        if self.shown:
            sys.stderr.write("\n")


# --------------------------------------------------------------------------- command groups
def _add_group(sub, name: str, *, help: str, description: str):
    """Register a command whose work is done by ACTION subcommands (``budget pump fit``);
    without an ACTION it prints its help and exits 2. Returns the ACTION subparsers."""
    p = sub.add_parser(name, help=help, description=description)
    p.set_defaults(func=_cmd_group_help, group_parser=p)
    return p.add_subparsers(dest=f"{name}_command", metavar="ACTION", parser_class=_Parser)


def _cmd_group_help(args) -> int:
    args.group_parser.print_help()
    return EXIT_BAD_INPUT


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
    _add_archive_options(p)
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
    _check_archive_option(args)
    from .text import budget_text
    b = _evaluate_spec(args)
    print(budget_text(b))
    if args.json:
        write_atomic(args.json, b.to_json())
        print(f"\nrecord written to {args.json}")
    _write_archive_option(args, b)
    return EXIT_OK


def _add_archive_options(p) -> None:
    """``--archive DIR`` and ``--force-archive`` (shared by ``run`` and ``report``)."""
    p.add_argument("--archive", metavar="DIR",
                   help="also copy the spec, every input file and the record into DIR, "
                        "content-addressed with a manifest of SHA-256 digests, so the budget "
                        "can be recomputed later (e.g. by verify --inputs DIR)")
    p.add_argument("--force-archive", action="store_true",
                   help="replace an existing archive in DIR")


def _check_archive_option(args) -> None:
    """Refuse an unusable --archive folder before any work is done."""
    if getattr(args, "archive", None):
        from .archive import check_archive_target
        check_archive_target(args.archive, force=args.force_archive)


def _write_archive_option(args, b) -> None:
    if not getattr(args, "archive", None):
        return
    from .archive import archive
    from .spec import load_spec
    info = archive(load_spec(args.spec), b, args.archive, force=args.force_archive)
    print(f"archive written to {info.path} (spec and {len(info.files)} input file"
          f"{'' if len(info.files) == 1 else 's'})")


# --------------------------------------------------------------------------- validate
def _add_validate(sub) -> None:
    p = sub.add_parser("validate", help="reproduce the published reference examples",
                       description="Run the built-in reference cases (GUM H.2 and H.3, "
                                   "EA-4/02 S3, JCGM 101 §9.2, GUM Table G.2, SI constants, "
                                   "NIST SP 1065 Allan deviations) "
                                   "and compare each computed number with the published one. "
                                   "Exit 0 only if every check passes.")
    p.add_argument("--json", metavar="OUT", help="write the checks as JSON to OUT")
    p.set_defaults(func=_cmd_validate)


def _cmd_validate(args) -> int:
    from .outputs import check_writable, write_atomic
    from .references import run_all
    from .text import validate_text
    if args.json:
        check_writable(args.json)
    checks = run_all()
    print(validate_text(checks))
    if args.json:
        write_atomic(args.json, json.dumps([c.to_dict() for c in checks], indent=2,
                                           ensure_ascii=False) + "\n")
    return EXIT_OK if all(c.passed for c in checks) else EXIT_CHECK_FAILED


# --------------------------------------------------------------------------- explain
def _add_explain(sub) -> None:
    p = sub.add_parser("explain", help="where each number of a budget comes from",
                       description="Without TERM: every term of every measurand, sorted by "
                                   "its share of u_c². With TERM: a fixed-section answer for "
                                   "that term (estimate, distribution and ν with their reasons, "
                                   "the partial derivative, contribution, sources and digests, "
                                   "module diagnostics, what-if lines). Reads a spec, or a "
                                   "stored result with --record.")
    p.add_argument("spec", nargs="?", metavar="SPEC", help="budget spec file (TOML)")
    p.add_argument("term", nargs="?", metavar="TERM", help="the term (input) to explain")
    p.add_argument("--record", metavar="RESULT.json",
                   help="explain a stored result record instead of evaluating a spec")
    p.add_argument("--measurand", metavar="NAME", help="only this measurand")
    p.add_argument("--json", metavar="OUT", help="write the answer as JSON to OUT")
    p.set_defaults(func=_cmd_explain)


def _cmd_explain(args) -> int:
    from .errors import ComputationError
    from .explain import explain_term, overview
    from .outputs import check_writable, write_atomic
    from .record import load_record
    from .text import explain_overview_text, explain_term_text
    if args.json:
        check_writable(args.json)
    if args.record:
        given = [x for x in (args.spec, args.term) if x]
        if len(given) > 1:
            raise UsageError("with --record give only TERM, not a spec", field="SPEC")
        b = load_record(args.record)
        term = given[0] if given else None
    else:
        if not args.spec:
            raise UsageError("give a SPEC file, or --record RESULT.json", field="SPEC")
        from .engine import evaluate
        from .spec import load_spec
        b = evaluate(load_spec(args.spec), monte_carlo_enabled=False)
        term = args.term
    if term is None:
        answer = overview(b, args.measurand)
        print(explain_overview_text(answer))
    else:
        answer = explain_term(b, term, args.measurand)
        print(explain_term_text(answer))
    if args.json:
        try:
            text = json.dumps(answer.to_dict(), indent=2, ensure_ascii=False, allow_nan=False)
        except ValueError:  # a module put inf/NaN in its diagnostics (its contract says None)
            raise ComputationError("the answer holds a non-finite number and cannot be "
                                   "written as JSON", file=args.json, field="--json") from None
        write_atomic(args.json, text + "\n")
        print(f"\nanswer written to {args.json}")
    return EXIT_OK


# --------------------------------------------------------------------------- compare
def _add_compare(sub) -> None:
    p = sub.add_parser("compare", help="compare runs: weighted mean, Birge ratio, E_n",
                       description="Compare result records of several runs: a table of runs, "
                                   "the weighted mean with internal and external uncertainty, "
                                   "Birge ratio, χ² and its p-value, and E_n (k = 2) of each "
                                   "run against a reference or the weighted mean. Terms with "
                                   "the same source digest in two records are treated as "
                                   "shared.")
    p.add_argument("records", nargs="*", metavar="RECORD.json", help="result records")
    p.add_argument("--reference", nargs="+", metavar="REF",
                   help="VALUE U (U with k = 2, in the measurand's unit) or a RECORD.json")
    p.add_argument("--measurand", metavar="NAME",
                   help="output to compare (default: the one named dev…, else the first)")
    p.add_argument("--pairwise", action="store_true", help="also E_n of every pair of runs")
    p.add_argument("--pdf", metavar="OUT.pdf", help="write the comparison as a PDF")
    p.add_argument("--json", metavar="OUT", help="write the comparison as JSON")
    p.set_defaults(func=_cmd_compare)


def _number(text: str) -> float | None:
    try:
        v = float(text)
    except ValueError:
        return None
    return v if math.isfinite(v) else None


def _cmd_compare(args) -> int:
    from .compare import ReferenceValue, compare_runs
    from .outputs import check_writable, write_atomic
    from .record import load_record
    from .text import compare_text
    records = list(args.records)
    reference, ref_file = None, None
    if args.reference:
        ref = list(args.reference)
        # argparse gives --reference every word after it; the words that do not belong to it
        # are further records
        if _number(ref[0]) is not None:
            if len(ref) < 2 or _number(ref[1]) is None:
                raise UsageError("--reference takes VALUE U (two numbers) or one RECORD.json",
                                 field="--reference")
            reference = ReferenceValue(_number(ref[0]), _number(ref[1]))
            records += ref[2:]
        else:
            ref_file = ref[0]
            records += ref[1:]
    for out in (args.pdf, args.json):
        if out:
            check_writable(out)
    runs = [load_record(f) for f in records]
    if ref_file is not None:
        reference = load_record(ref_file)
    if not runs:
        raise UsageError("give at least one RECORD.json", field="RECORD")
    c = compare_runs(runs, measurand=args.measurand, reference=reference,
                     pairwise=args.pairwise, files=records + ([ref_file] if ref_file else []))
    print(compare_text(c, records))
    if args.pdf:
        from .report.compare_render import compare_pdf
        write_atomic(args.pdf, compare_pdf(c, files=[Path(f).name for f in records],
                                           software=f"qcs-budget {__version__}"))
        print(f"\nPDF written to {args.pdf}")
    if args.json:
        d = {"records": records, "reference_record": ref_file, **c.to_dict()}
        write_atomic(args.json, json.dumps(d, indent=2, ensure_ascii=False, allow_nan=False)
                     + "\n")
        print(f"\ncomparison written to {args.json}")
    return EXIT_OK


# --------------------------------------------------------------------------- pump
def _positive_float(text: str) -> float:
    v = _number(text)
    if v is None or v <= 0:
        raise argparse.ArgumentTypeError(f"must be a number > 0; got {text!r}")
    return v


def _finite_float(text: str) -> float:
    v = _number(text)
    if v is None:
        raise argparse.ArgumentTypeError(f"must be a finite number; got {text!r}")
    return v


def _add_pump_parser(sub) -> None:
    psub = _add_group(sub, "pump",
                      help="pump characterisation: fit a plateau scan or escape record",
                      description="Pump characterisation tools.")
    f = psub.add_parser("fit", help="fit a pump model and report the predicted pump error",
                        description="Fit the decay-cascade model to a plateau scan (gate_voltage, "
                                    "n_mean[, n_std]) or the sequential-escape model to an "
                                    "escape record (hold_time_s, n_mean[, gate_voltage, n_std]) "
                                    "and print a fixed-section report: parameters with standard "
                                    "errors and correlations, fit statistics, the predicted "
                                    "error at the operating point (a model extrapolation, not a "
                                    "measurement), the regime verdict when temperatures are "
                                    "given, and the fit-result file. DATA may also be a "
                                    "fit-result file (.toml or .json).")
    f.add_argument("data", metavar="DATA", help="data CSV, or a fit-result file (.toml/.json)")
    f.add_argument("--model", choices=("decay-cascade", "sequential-escape"),
                   help="model to fit (required for a data CSV)")
    f.add_argument("--plateau", type=int, metavar="N", help="wanted electrons per cycle "
                   "(default 1, or the fit file's)")
    f.add_argument("--operating-point", type=_finite_float, metavar="V",
                   help="gate voltage of operation in V (default: the best one the fit predicts)")
    f.add_argument("--hold-time", type=_positive_float, metavar="S",
                   help="hold time of operation in s (sequential escape)")
    f.add_argument("--loaded", type=int, metavar="N", help="electrons loaded (sequential escape)")
    f.add_argument("--steps", type=int, metavar="K", help="steps of the decay-cascade model")
    slope = f.add_mutually_exclusive_group()
    slope.add_argument("--shared-slope", dest="shared_slope", action="store_true", default=None,
                       help="one gate slope for all steps/electrons")
    slope.add_argument("--separate-slopes", dest="shared_slope", action="store_false",
                       help="one gate slope per step/electron")
    f.add_argument("--reference-voltage", type=_finite_float, metavar="V",
                   help="V_ref of the escape times (default: the operating point)")
    f.add_argument("--allow-extrapolation", action="store_true",
                   help="accept an operating point outside the data")
    f.add_argument("--samples", type=int, metavar="N", default=20000,
                   help="parameter samples for the uncertainty of δ (default 20000)")
    f.add_argument("--seed", type=_seed, metavar="S", default=20100430,
                   help="seed of those samples (default 20100430)")
    f.add_argument("--temperatures", metavar="FILE",
                   help="escape rates at several temperatures (temperature_k, gate_voltage, "
                        "escape_rate[, escape_rate_std]) for the thermal-activation check")
    f.add_argument("--figures", metavar="DIR", help="write the figures as SVG files into DIR")
    f.add_argument("--write-fit", metavar="FILE",
                   help="write the fit-result file (JSON if FILE ends in .json, else TOML)")
    f.set_defaults(func=_cmd_pump_fit)


def _cmd_pump_fit(args) -> int:
    from .inputs.pump_analysis import add_thermal_check, analyse_data, analyse_fit_file
    from .inputs.pump_fitfile import fit_file_text
    from .inputs.pump_report import figure_data, fit_report
    from .outputs import check_writable, write_atomic

    def option_error(key, message):
        return UsageError(message, field="--" + key.replace("_", "-"))

    data = Path(args.data)
    if not data.is_file():
        raise UsageError("file not found", file=args.data, field="DATA")
    if args.write_fit:
        check_writable(args.write_fit)
    if args.figures and not Path(args.figures).is_dir():
        raise UsageError("the folder does not exist", file=args.figures, field="--figures")
    if args.temperatures and not Path(args.temperatures).is_file():
        raise UsageError("file not found", file=args.temperatures, field="--temperatures")
    if data.suffix.lower() in (".toml", ".json"):
        for opt in ("loaded", "steps", "shared_slope", "reference_voltage"):
            if getattr(args, opt) is not None:
                raise UsageError("applies to fitting a data CSV; a fit-result file carries the "
                                 "model settings", field="--" + opt.replace("_", "-"))
        a = analyse_fit_file(data, plateau=args.plateau, operating_point=args.operating_point,
                             hold_time=args.hold_time, allow_extrapolation=args.allow_extrapolation,
                             samples=args.samples, seed=args.seed, shown=args.data,
                             option_error=option_error)
        if args.model and args.model != a.model:
            raise UsageError(f"is {args.model} but {args.data} holds a {a.model} fit",
                             field="--model")
    else:
        if not args.model:
            raise UsageError("is required for a data CSV (decay-cascade or sequential-escape)",
                             field="--model")
        a = analyse_data(data, model=args.model,
                         plateau=1 if args.plateau is None else args.plateau,
                         operating_point=args.operating_point, hold_time=args.hold_time,
                         loaded=args.loaded, steps=args.steps, shared_slope=args.shared_slope,
                         reference_voltage=args.reference_voltage,
                         allow_extrapolation=args.allow_extrapolation, samples=args.samples,
                         seed=args.seed, shown=args.data, option_error=option_error,
                         best_if_missing=True)
    if args.temperatures:
        a = add_thermal_check(a, Path(args.temperatures), shown=args.temperatures)
    figures = []
    if args.figures:
        from .report.figures import module_figure
        figures = [(Path(args.figures) / f"{fig['id']}.svg", module_figure(fig, fig["id"]))
                   for fig in figure_data(a)]
    print(fit_report(a), end="")
    if args.write_fit:
        fmt = "json" if args.write_fit.lower().endswith(".json") else "toml"
        write_atomic(args.write_fit, fit_file_text(a.record, fmt))
        print(f"\nfit result written to {args.write_fit}")
    for path, svg in figures:
        write_atomic(path, svg)
    if figures:
        print(f"figures written to {args.figures}: " + ", ".join(p.name for p, _ in figures))
    return EXIT_OK


# --------------------------------------------------------------------------- identity, sign, verify
_PASSPHRASE_ENV = "BUDGET_PASSPHRASE"


def _quiet_library_logs() -> None:
    """pyHanko logs validation details (with tracebacks) as warnings; the CLI says it in one
    line instead, so those records go nowhere (a user who configures logging still gets them
    through their own handlers on these loggers)."""
    import logging
    for name in ("pyhanko", "pyhanko_certvalidator"):
        log = logging.getLogger(name)
        if not any(isinstance(h, logging.NullHandler) for h in log.handlers):
            log.addHandler(logging.NullHandler())
        log.propagate = False


def _passphrase(prompt: str, *, confirm: bool = False) -> str:
    """The passphrase from $BUDGET_PASSPHRASE or a prompt on the terminal (never echoed)."""
    import getpass
    import os
    env = os.environ.get(_PASSPHRASE_ENV)
    if env is not None:
        return env
    if not sys.stdin.isatty():
        raise UsageError(f"no passphrase: set {_PASSPHRASE_ENV} or run on a terminal",
                         field="passphrase")
    first = getpass.getpass(prompt)
    if confirm and getpass.getpass("Repeat the passphrase: ") != first:
        raise UsageError("the two passphrases differ", field="passphrase")
    return first


def _read_input(path: str, field: str) -> bytes:
    from .errors import DataError
    try:
        return Path(path).read_bytes()
    except FileNotFoundError:
        raise DataError("file not found", file=path, field=field) from None
    except OSError as exc:
        raise DataError(f"cannot read it ({exc.strerror})", file=path, field=field) from None


def _add_identity(sub) -> None:
    isub = _add_group(sub, "identity", help="create a signing identity (key and certificate)",
                      description="Signing identities for labs without their own PKI.")
    c = isub.add_parser("create", help="write DIR/identity.p12 and DIR/identity.pem",
                        description="Create an EC P-256 key and a self-signed certificate "
                                    "naming the signer and role. DIR/identity.p12 holds both, "
                                    "encrypted with a passphrase (from $BUDGET_PASSPHRASE or a "
                                    "prompt); DIR/identity.pem is the certificate to give to "
                                    "verifiers (budget verify --trust).")
    c.add_argument("--name", required=True, help="the signer's name")
    c.add_argument("--role", default="", help="the signer's role, e.g. 'Head of laboratory'")
    c.add_argument("--out", required=True, metavar="DIR", help="folder for the two files")
    c.add_argument("--force", action="store_true", help="replace existing identity files")
    c.set_defaults(func=_cmd_identity_create)


def _cmd_identity_create(args) -> int:
    from .signing import create_identity
    from .text import identity_text
    out = Path(args.out)
    for f in ("identity.p12", "identity.pem"):  # refuse before asking for a passphrase
        if (out / f).exists() and not args.force:
            raise UsageError("exists already; use --force to replace it", file=str(out / f),
                             field="--out")
    pw = _passphrase("Passphrase for the new identity: ", confirm=True)
    ident = create_identity(args.name, args.role, out, pw, force=args.force)
    print(identity_text(ident))
    return EXIT_OK


def _add_sign(sub) -> None:
    p = sub.add_parser("sign", help="sign a report (PAdES) with the evidence embedded",
                       description="Embed the result record, the spec and the input-file "
                                   "manifest in the PDF and sign it (PAdES baseline) with a "
                                   "visible block naming the signer, role and date. The record "
                                   "and spec come from --record and --spec, or from the PDF "
                                   "itself when it carries them already (e.g. a co-signature). "
                                   "A certificate draft is signed as the final certificate: it "
                                   "is rendered again from the same record (whose digest the "
                                   "draft carries) without the DRAFT watermark. "
                                   "The passphrase comes from $BUDGET_PASSPHRASE or a prompt.")
    p.add_argument("report", help="the report PDF")
    p.add_argument("--identity", required=True, metavar="FILE.p12",
                   help="PKCS#12 identity (budget identity create, or the lab's PKI)")
    p.add_argument("-o", "--output", required=True, metavar="SIGNED.pdf", help="signed PDF")
    p.add_argument("--reason", default="", help="reason for signing, e.g. 'approved'")
    p.add_argument("--location", default="", help="where it was signed")
    p.add_argument("--spec", metavar="SPEC", help="the spec the report was computed from")
    p.add_argument("--record", metavar="RECORD.json",
                   help="the result record the report shows (budget run --json)")
    p.add_argument("--force", action="store_true", help="replace an existing output file")
    p.set_defaults(func=_cmd_sign)


def _cmd_sign(args) -> int:
    from .archive import input_manifest
    from .errors import DataError
    from .outputs import check_writable, write_atomic
    from .record import record_from_text
    from .signing import ATTACHMENTS, read_attachments, sign_pdf
    _quiet_library_logs()
    check_writable(args.output, force=args.force)
    if not Path(args.identity).is_file():   # before reading anything or asking a passphrase
        raise UsageError("identity file not found", file=args.identity, field="--identity")
    pdf = _read_input(args.report, "report")
    try:
        carried = read_attachments(pdf)
    except DataError as exc:
        raise exc.located(file=args.report) from None
    record = _read_input(args.record, "--record") if args.record else \
        carried.get(ATTACHMENTS["record"])
    spec = _read_input(args.spec, "--spec") if args.spec else carried.get(ATTACHMENTS["spec"])
    if record is None or spec is None:
        missing = " and ".join(o for o, v in (("--record", record), ("--spec", spec))
                               if v is None)
        raise UsageError(f"the report carries no result record and spec; give {missing}",
                         field=missing.split(" ")[0])
    # check the evidence before asking for the passphrase; errors name the file it came from
    record_file = args.record or f"{args.report} (embedded record)"
    from .report import final_from_draft
    pdf, final = final_from_draft(pdf, record_from_text(record, file=record_file),
                                  record_file=record_file)
    note = (" (the final certificate, rendered from the reviewed draft's record without the "
            "DRAFT watermark)") if final else ""
    manifest = input_manifest(record, spec, spec_name=args.spec)
    pw = _passphrase(f"Passphrase for {args.identity}: ")
    try:
        signed = sign_pdf(pdf, args.identity, pw, reason=args.reason, location=args.location,
                          record_json=record, spec_text=spec, manifest=manifest)
    except DataError as exc:
        raise exc.located(file=args.report) from None
    finally:
        del pw
    write_atomic(args.output, signed)
    print(f"signed {args.report} -> {args.output}{note}")
    return EXIT_OK


def _add_verify(sub) -> None:
    p = sub.add_parser("verify", help="check a signed report and, optionally, its inputs",
                       description="Exit 0 only if every signature is intact, every signer is "
                                   "trusted and nothing that changes content was appended after "
                                   "signing; exit 1 otherwise, saying what failed. With --inputs "
                                   "DIR (a folder of the data files laid out as beside the spec, "
                                   "or an archive from --archive), also compare each input "
                                   "file's digest with the signed manifest and re-run the "
                                   "embedded spec, comparing the new record byte for byte.")
    p.add_argument("signed", help="the signed PDF")
    p.add_argument("--trust", required=True, action="append", metavar="CERT.pem",
                   help="certificate to trust (repeat for several)")
    p.add_argument("--inputs", metavar="DIR", help="folder of input files, or an archive")
    p.set_defaults(func=_cmd_verify)


def _cmd_verify(args) -> int:
    import tempfile

    from .archive import is_archive, recompute, restore
    from .text import recompute_text, signatures_text, verdict_text
    from .verify import verify_pdf
    _quiet_library_logs()
    pdf = _read_input(args.signed, "signed")
    if args.inputs and not Path(args.inputs).is_dir():
        raise UsageError("is not a folder", file=args.inputs, field="--inputs")
    res = verify_pdf(pdf, args.trust, file=args.signed)
    found = signatures_text(res)
    if found:  # shown before the re-run, which takes a while and may fail
        print(found)
    problems = list(res.problems)
    if args.inputs and res.spec is not None and res.record is not None and \
            res.manifest is not None:
        with tempfile.TemporaryDirectory(prefix="budget-verify-") as tmp:
            folder = restore(args.inputs, tmp).parent if is_archive(args.inputs) \
                else Path(args.inputs)
            chk = recompute(res.spec, res.record, res.manifest, folder)
        print(recompute_text(chk))
        problems += list(chk.problems)
    elif args.inputs:
        problems.append("no embedded spec, record and manifest to re-run")
    print(verdict_text(problems, inputs_checked=bool(args.inputs)))
    return EXIT_CHECK_FAILED if problems else EXIT_OK


# --------------------------------------------------------------------------- report
def _add_report(sub) -> None:
    p = sub.add_parser(
        "report", help="write the uncertainty report or a certificate draft (PDF, HTML)",
        description="Render a budget as an A4 report (PDF with -o, HTML with --html): header, "
                    "result statement, budget table, share chart, Monte Carlo histogram, input "
                    "details and figures, cautions, digests, signature block. --certificate "
                    "writes the calibration-certificate draft (ISO/IEC 17025:2017 7.8) instead, "
                    "watermarked DRAFT. Give SPEC to evaluate it now, or --record RESULT.json "
                    "(from 'budget run --json') to render a stored result without recomputing; "
                    "SPEC is then left out.",
        epilog="An existing output file is replaced, except a signed PDF, which needs --force.")
    p.add_argument("spec", nargs="?", metavar="SPEC",
                   help="budget spec (TOML); leave out with --record")
    p.add_argument("-o", "--output", metavar="OUT.pdf", help="write the PDF to OUT.pdf")
    p.add_argument("--html", metavar="OUT.html", help="write the HTML to OUT.html")
    p.add_argument("--record", metavar="RESULT.json",
                   help="render this stored result record instead of evaluating a spec")
    p.add_argument("--certificate", action="store_true",
                   help="the calibration-certificate draft instead of the full report")
    p.add_argument("--trials", type=_trials, metavar="N", default=argparse.SUPPRESS,
                   help="Monte Carlo trials (integer or 'adaptive'); overrides the spec")
    p.add_argument("--seed", type=_seed, metavar="S", help="random seed; overrides the spec")
    p.add_argument("--no-monte-carlo", action="store_true", help="skip the Monte Carlo method")
    p.add_argument("--force", action="store_true", help="replace an existing signed PDF")
    _add_archive_options(p)
    p.set_defaults(func=_cmd_report)


def _check_report_args(args) -> list[str]:
    """Refuse argument combinations that do not fit; return the output paths."""
    if args.record and args.spec:
        raise UsageError("give either SPEC or --record RESULT.json, not both", field="SPEC")
    if not args.record and not args.spec:
        raise UsageError("give a SPEC file, or --record RESULT.json", field="SPEC")
    if args.record:
        given = [o for o, v in (("--trials", hasattr(args, "trials")),
                                ("--seed", args.seed is not None),
                                ("--no-monte-carlo", args.no_monte_carlo),
                                ("--archive", bool(args.archive))) if v]
        if given:
            raise UsageError(f"{given[0]} needs a SPEC: a stored record is rendered as it is",
                             field=given[0])
    outs = [o for o in (args.output, args.html) if o]
    if not outs:
        raise UsageError("nothing to write: give -o OUT.pdf and/or --html OUT.html",
                         field="--output")
    if args.output and args.html and Path(args.output).resolve() == Path(args.html).resolve():
        raise UsageError("-o and --html name the same file", field="--html")
    ins = {Path(x).resolve() for x in (args.spec, args.record) if x}
    for o in outs:
        if Path(o).resolve() in ins:
            raise UsageError("would overwrite an input file", file=o, field="output")
    return outs


def _cmd_report(args) -> int:
    from .outputs import check_writable, write_atomic
    from .report import document_info, looks_signed, render_html, render_pdf_layout
    from .report.context import result_line
    outs = _check_report_args(args)
    for o in outs:
        check_writable(o)
        p = Path(o)
        if o == args.output and p.is_file() and not args.force:
            if looks_signed(_read_input(o, "--output")):
                raise UsageError("is a signed PDF; use --force to replace it", file=o,
                                 field="--output")
    _check_archive_option(args)
    if args.record:
        from .record import load_record
        b = load_record(args.record)
    else:
        b = _evaluate_spec(args)
    html = render_html(b, certificate=args.certificate)
    rendered = (render_pdf_layout(html, info=document_info(b, certificate=args.certificate))
                if args.output else None)
    if args.html:
        write_atomic(args.html, html)
    kind = "certificate draft" if args.certificate else "report"
    for m in b.measurands:
        print(result_line(m))
    if args.html:
        print(f"{kind} (HTML) written to {args.html}")
    if rendered is not None:
        write_atomic(args.output, rendered.pdf)
        where = (f"; signature field on page {rendered.signature.page}"
                 if rendered.signature else "")
        print(f"{kind} written to {args.output} ({rendered.pages} page"
              f"{'' if rendered.pages == 1 else 's'}{where})")
    _write_archive_option(args, b)
    return EXIT_OK


# --------------------------------------------------------------------------- main
COMMANDS = [_add_run, _add_validate, _add_explain, _add_compare, _add_pump_parser,
            _add_identity, _add_sign, _add_verify, _add_report]


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="budget", description="Uncertainty budgets (JCGM 100 / JCGM 101) for "
                     "quantized current sources: run a budget spec, validate against published "
                     "examples, report, explain, compare.")
    parser.add_argument("--version", action="version", version=f"qcs-budget {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
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


def main(argv: list[str] | None = None) -> int:
    previous = _install_stop_handlers()
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
        if not getattr(args, "func", None):
            raise UsageError("budget: a command is required (see 'budget --help')")
        return args.func(args)
    except BudgetError as exc:
        print(f"budget: error: {exc.one_line()}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt as exc:
        what = "terminated" if isinstance(exc, _Terminated) else "interrupted"
        print(f"budget: {what}; no output written", file=sys.stderr)
        # 128 + signal number, the shell's convention (130 for SIGINT, 143 for SIGTERM)
        return 128 + exc.signum if isinstance(exc, _Terminated) else EXIT_INTERRUPTED
    except BrokenPipeError:  # pragma: no cover - e.g. piped into head
        return EXIT_OK
    finally:
        _restore_stop_handlers(previous)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
