"""``budget report``: the uncertainty report or the certificate draft (PDF, HTML)."""

from __future__ import annotations

import argparse
from pathlib import Path

from ..errors import UsageError
from .common import (
    EXIT_OK,
    add_archive_options,
    archive_message,
    check_archive_option,
    evaluate_spec,
    print_warnings,
    read_input,
    seed_arg,
    shown_output,
    stage_archive_option,
    trials_arg,
)


def add_report(sub) -> None:
    p = sub.add_parser(
        "report", help="write the uncertainty report or a certificate draft (PDF, HTML)",
        description="Render a budget as an A4 report (PDF with -o, HTML with --html): header, "
                    "result statement, budget table (shares drawn in its rows), Monte Carlo histogram, input "
                    "details and figures, cautions, digests, signature block. --certificate "
                    "writes the calibration-certificate draft (ISO/IEC 17025:2017 7.8) instead, "
                    "watermarked DRAFT. Give SPEC to evaluate it now, or --record RESULT.json "
                    "(from 'budget run --json') to render a stored result without recomputing; "
                    "SPEC is then left out. The PDF carries the record (and the spec, when "
                    "made from one) as attachments, so 'budget sign' needs nothing else.",
        epilog="An existing output file is replaced, except a signed PDF, which needs --force "
               "(README \"Output files\").")
    p.add_argument("spec", nargs="?", metavar="SPEC",
                   help="budget spec (TOML); leave out with --record")
    p.add_argument("-o", "--output", metavar="OUT.pdf", help="write the PDF to OUT.pdf")
    p.add_argument("--html", metavar="OUT.html", help="write the HTML to OUT.html")
    p.add_argument("--record", metavar="RESULT.json",
                   help="render this stored result record instead of evaluating a spec")
    p.add_argument("--certificate", action="store_true",
                   help="the calibration-certificate draft instead of the full report")
    p.add_argument("--trials", type=trials_arg, metavar="N", default=argparse.SUPPRESS,
                   help="Monte Carlo trials (integer or 'adaptive'); overrides the spec")
    p.add_argument("--seed", type=seed_arg, metavar="S", help="random seed; overrides the spec")
    p.add_argument("--no-monte-carlo", action="store_true", help="skip the Monte Carlo method")
    p.add_argument("--force", action="store_true", help="replace an existing signed PDF; write through a symbolic link to a "
                        "file (its target is replaced, the link kept)")
    add_archive_options(p)
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
    if args.output == "-" and args.html == "-":
        raise UsageError("-o and --html both go to standard output; only one can",
                         field="--html")
    if args.output and args.html and "-" not in (args.output, args.html) and \
            Path(args.output).resolve() == Path(args.html).resolve():
        raise UsageError("-o and --html name the same file", field="--html")
    ins = {Path(x).resolve() for x in (args.spec, args.record) if x}
    for o in outs:
        if o != "-" and Path(o).resolve() in ins:
            raise UsageError("would overwrite an input file", file=o, field="output")
    return outs


def _spec_bytes(path: str, b) -> bytes:
    """The spec's bytes for the PDF to carry (``budget sign`` then needs nothing else); refused
    when the file changed after it was evaluated (its digest is no longer the record's)."""
    import hashlib

    from ..errors import DataError
    raw = read_input(path, "SPEC")
    if hashlib.sha256(raw).hexdigest() != b.run.get("spec_sha256"):
        raise DataError("the spec file changed while the report was made; run again",
                        file=path, field="spec_sha256")
    return raw


def _cmd_report(args) -> int:
    from ..outputs import check_writable
    from ..report import document_info, looks_signed, render_html, render_pdf_layout
    from ..report.statement import stated_result
    from ..staging import OutputSet
    outs = _check_report_args(args)
    for o in outs:
        check_writable(o, force=args.force, field="--output" if o == args.output else "--html")
        p = Path(o)
        if o == args.output and o != "-" and p.is_file() and not args.force:
            if looks_signed(read_input(o, "--output")):
                raise UsageError("is a signed PDF; use --force to replace it", file=o,
                                 field="--output")
    check_archive_option(args)
    if args.record:
        from ..record import load_record
        b = load_record(args.record)
        evidence = {"record": read_input(args.record, "--record")}
    else:
        b = evaluate_spec(args)
        evidence = {"record": b.to_json().encode("utf-8"), "spec": _spec_bytes(args.spec, b)}
    html = render_html(b, certificate=args.certificate)
    rendered = (render_pdf_layout(html, info=document_info(b, certificate=args.certificate),
                                  evidence=evidence)
                if args.output else None)
    with OutputSet() as out:  # HTML, PDF and archive: all or none
        if args.html:
            out.file(args.html, html, force=args.force)
        if rendered is not None:
            out.file(args.output, rendered.pdf, force=args.force)
        info = stage_archive_option(args, b, out)
        out.commit()
    kind = "certificate draft" if args.certificate else "report"
    for m in b.measurands:
        print(stated_result(b, m).line)   # the validated result (JCGM 101 §8)
    if args.html:
        print(f"{kind} (HTML) written to {shown_output(args.html)}")
    if rendered is not None:
        where = (f"; signature field on page {rendered.signature.page}"
                 if rendered.signature else "")
        print(f"{kind} written to {shown_output(args.output)} ({rendered.pages} page"
              f"{'' if rendered.pages == 1 else 's'}{where})")
    if info is not None:
        print(archive_message(info))
    print_warnings(b)  # last: an error while writing stays the only line on stderr
    return EXIT_OK
