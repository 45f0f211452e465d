"""``budget run`` and ``budget validate``."""

from __future__ import annotations

import argparse
import json

from .common import (
    EXIT_CHECK_FAILED,
    EXIT_OK,
    add_archive_options,
    add_force_option,
    archive_message,
    check_archive_option,
    evaluate_spec,
    print_warnings,
    seed_arg,
    shown_output,
    stage_archive_option,
    trials_arg,
    write_outputs,
)
from .logbook import add_book_options, check_run_logbook, stage_run_record


def add_run(sub) -> None:
    p = sub.add_parser("run", help="evaluate a budget spec and print its budget table",
                       description="Evaluate a budget spec (TOML): GUM law of propagation and "
                                   "the JCGM 101 Monte Carlo check. Prints the budget table; "
                                   "--json writes the result record.")
    p.add_argument("spec", help="budget spec file (TOML)")
    p.add_argument("--json", metavar="OUT", help="write the result record (JSON) to OUT")
    p.add_argument("--trials", type=trials_arg, metavar="N", default=argparse.SUPPRESS,
                   help="Monte Carlo trials (integer or 'adaptive'); overrides the spec")
    p.add_argument("--seed", type=seed_arg, metavar="S", help="random seed; overrides the spec")
    p.add_argument("--no-monte-carlo", action="store_true", help="skip the Monte Carlo method")
    add_force_option(p)
    add_archive_options(p)
    p.add_argument("--logbook", action="store_true",
                   help="also add the record to the logbook (--book FILE, else "
                        "$BUDGET_LOGBOOK, else the per-user book)")
    add_book_options(p, wait=True)
    p.set_defaults(func=_cmd_run)


def _cmd_run(args) -> int:
    from ..outputs import check_writable
    if args.json:
        check_writable(args.json, force=args.force, field="--json")
    check_archive_option(args)
    book = check_run_logbook(args)
    from ..staging import OutputSet
    from ..text import budget_text
    b = evaluate_spec(args)
    print(budget_text(b))
    # the record, the archive and the logbook's row: all or none
    with OutputSet() as out:
        if args.json:
            out.file(args.json, b.to_json(), force=args.force)
        info = stage_archive_option(args, b, out)
        # last: the book stays locked for writing from here to the commit (milliseconds)
        rid = None if book is None else stage_run_record(args, b, book, out)
        out.commit()
    if rid is not None:
        print(f"\nrecord added to the logbook {book} as #{rid}")
    if args.json:
        print(f"\nrecord written to {shown_output(args.json)}")
    if info is not None:
        print(archive_message(info))
    print_warnings(b)  # last: an error while writing stays the only line on stderr
    return EXIT_OK




def add_validate(sub) -> None:
    p = sub.add_parser("validate", help="reproduce the published reference examples",
                       description="Run the built-in reference cases (GUM H.2 and H.3, "
                                   "EA-4/02 S3, JCGM 101 §9.2, GUM Table G.2, SI constants, "
                                   "NIST SP 1065 Allan deviations) "
                                   "and compare each computed number with the published one. "
                                   "Exit 0 only if every check passes.")
    p.add_argument("--json", metavar="OUT", help="write the checks as JSON to OUT")
    add_force_option(p)
    p.set_defaults(func=_cmd_validate)


def _cmd_validate(args) -> int:
    from ..outputs import check_writable
    from ..references import run_all
    from ..text import validate_text
    if args.json:
        check_writable(args.json, force=args.force, field="--json")
    checks = run_all()
    print(validate_text(checks))
    if args.json:
        write_outputs((args.json, json.dumps([c.to_dict() for c in checks], indent=2,
                                             ensure_ascii=False) + "\n"), force=args.force)
    return EXIT_OK if all(c.passed for c in checks) else EXIT_CHECK_FAILED
