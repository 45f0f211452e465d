"""``budget identity create``, ``budget sign`` and ``budget verify``."""

from __future__ import annotations

import sys
from pathlib import Path

from ..errors import UsageError
from .common import (
    EXIT_CHECK_FAILED,
    EXIT_OK,
    add_group,
    print_warnings,
    read_input,
    shown_output,
    write_outputs,
)

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


def add_identity(sub) -> None:
    isub = add_group(sub, "identity", help="create a signing identity (key and certificate)",
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
    from ..signing import create_identity
    from ..text import identity_text
    out = Path(args.out)
    for f in ("identity.p12", "identity.pem"):  # refuse before asking for a passphrase
        if (out / f).exists() and not args.force:
            raise UsageError("exists already; use --force to replace it", file=str(out / f),
                             field="--out")
    pw = _passphrase("Passphrase for the new identity: ", confirm=True)
    ident = create_identity(args.name, args.role, out, pw, force=args.force)
    print(identity_text(ident))
    return EXIT_OK


def add_sign(sub) -> None:
    p = sub.add_parser("sign", help="sign a report (PAdES) with the evidence embedded",
                       description="Embed the result record, the spec and the input-file "
                                   "manifest in the PDF and sign it (PAdES baseline) with a "
                                   "visible block naming the signer, role and date. A report "
                                   "or draft made by 'budget report' carries its record (and, "
                                   "when made from a spec, the spec), so the PDF is all that is "
                                   "needed; --record and --spec give them for a document made "
                                   "elsewhere. "
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
    p.add_argument("--accept-warnings", action="store_true",
                   help="sign although the record has warnings of severity 'error'; the "
                        "signature's reason then lists them")
    p.set_defaults(func=_cmd_sign)


def _cmd_sign(args) -> int:
    from ..archive import input_manifest
    from ..errors import DataError
    from ..outputs import check_writable
    from ..record import record_from_text
    from ..signing import ATTACHMENTS, read_attachments, sign_pdf
    _quiet_library_logs()
    check_writable(args.output, force=args.force, replace=False, field="--output")
    if not Path(args.identity).is_file():   # before reading anything or asking a passphrase
        raise UsageError("identity file not found", file=args.identity, field="--identity")
    pdf = read_input(args.report, "report")
    try:
        carried = read_attachments(pdf)
    except DataError as exc:
        raise exc.located(file=args.report) from None
    record = read_input(args.record, "--record") if args.record else \
        carried.get(ATTACHMENTS["record"])
    spec = read_input(args.spec, "--spec") if args.spec else carried.get(ATTACHMENTS["spec"])
    if record is None or spec is None:
        missing = " and ".join(o for o, v in (("--record", record), ("--spec", spec))
                               if v is None)
        what = " and ".join(w for w, v in (("result record", record), ("spec", spec))
                            if v is None)
        raise UsageError(f"the report carries no {what} (it was not made by 'budget report' "
                         f"from a spec); give {missing}", field=missing.split(" ")[0])
    # check the evidence before asking for the passphrase; errors name the file it came from
    record_file = args.record or f"{args.report} (embedded record)"
    from ..report import final_from_draft
    from ..warnings import errors_of
    budget = record_from_text(record, file=record_file)
    errors = errors_of(budget.warnings)
    reason = args.reason
    if errors and not args.accept_warnings:
        raise UsageError(f"the record has {len(errors)} unresolved warning"
                         f"{'' if len(errors) == 1 else 's'} of severity 'error' ("
                         + "; ".join(w.line() for w in errors)[:300] + "); resolve "
                         f"{'it' if len(errors) == 1 else 'them'} or sign with "
                         "--accept-warnings", file=record_file, field="warnings")
    if errors:
        # the signed document must say what the signer accepted: the signature's reason is
        # shown in the visible block and the signature dictionary
        listed = "; ".join(f"{w.code} ({w.input})" if w.input else w.code for w in errors)
        reason = (f"{reason} - " if reason else "") + f"accepted warnings: {listed}"
    # ISO/IEC 17025 §7.8.2.1 i, j: the dates the certificate states against the signing day
    import datetime as _dt

    from ..report.dates import check_dates
    today = _dt.datetime.now(_dt.UTC).date()
    dates = check_dates(budget.run.get("report") or {}, today)
    if dates.errors:
        raise UsageError("; ".join(dates.errors) + "; correct the spec and render again",
                         file=record_file, field="report")
    pdf, final = final_from_draft(pdf, budget, record_file=record_file,
                                  signing_date=today.isoformat())
    note = (" (the final certificate, rendered from the reviewed draft's record without the "
            "DRAFT watermark)") if final else ""
    manifest = input_manifest(record, spec, spec_name=args.spec)
    pw = _passphrase(f"Passphrase for {args.identity}: ")
    try:
        signed = sign_pdf(pdf, args.identity, pw, reason=reason, location=args.location,
                          record_json=record, spec_text=spec, manifest=manifest)
    except DataError as exc:
        raise exc.located(file=args.report) from None
    finally:
        del pw
    write_outputs((args.output, signed), force=args.force)
    print(f"signed {args.report} -> {shown_output(args.output)}{note}")
    for w in dates.warnings:
        print(f"warning [report.dates]: {w}", file=sys.stderr)
    print_warnings(budget)
    return EXIT_OK


def add_verify(sub) -> None:
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

    from ..archive import is_archive, restore
    from ..recompute import recompute
    from ..text import recompute_text, signatures_text, verdict_text
    from ..verify import verify_pdf
    _quiet_library_logs()
    pdf = read_input(args.signed, "signed")
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
