"""``budget logbook add|list|show|trend|export`` and the ``--logbook`` option of ``budget run``.

Where the book is: ``--book FILE``, else ``$BUDGET_LOGBOOK``, else the per-user data folder
(:func:`budget.logbook.resolve_book`). A locked book is waited for ``--wait`` seconds (default
10), then refused.
"""

from __future__ import annotations

import dataclasses
import json
import re
from pathlib import Path

from ..errors import UsageError, did_you_mean
from .common import EXIT_OK, add_force_option, add_group, positive_float, write_outputs

_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")


def add_book_options(p, *, wait: bool = False) -> None:
    p.add_argument("--book", metavar="FILE",
                   help="the logbook file (default: $BUDGET_LOGBOOK, else "
                        "~/.local/share/qcs-budget/logbook.sqlite)")
    if wait:
        p.add_argument("--wait", type=positive_float, metavar="S", default=None,
                       help="seconds to wait for a book another process is writing "
                            "(default 10)")


def _book(args):
    from ..logbook import resolve_book
    return resolve_book(getattr(args, "book", None))


def _wait(args) -> float:
    from ..logbook import DEFAULT_WAIT_S
    w = getattr(args, "wait", None)
    return DEFAULT_WAIT_S if w is None else w


def _open(args):
    from ..logbook import Logbook
    path, _default = _book(args)
    return Logbook.open(path, wait_s=_wait(args))


def add_logbook(sub) -> None:
    g = add_group(sub, "logbook", help="the laboratory's logbook: keep every record, trends",
                  description="Keep every result record in one SQLite book and watch the "
                              "measurand over months: weighted means per chain, a control "
                              "rule against the other chain and a step test at every "
                              "recalibration.")
    p = g.add_parser("add", help="add result records to the book",
                     description="Add result records (budget run --json) in one transaction: "
                                 "all or none. A record already in the book, of another "
                                 "schema, or whose stated digest does not match is refused.")
    p.add_argument("records", nargs="+", metavar="RECORD.json")
    add_book_options(p, wait=True)
    p.set_defaults(func=_cmd_add)

    p = g.add_parser("list", help="list the records in the book",
                     description="One line per record, by measurement date.")
    p.add_argument("--since", metavar="DATE", help="only records measured on or after DATE "
                                                   "(YYYY-MM-DD)")
    p.add_argument("--chain", metavar="NAME", help="only records of this chain")
    p.add_argument("--json", metavar="OUT", help="write the list as JSON to OUT")
    add_force_option(p)
    add_book_options(p, wait=True)
    p.set_defaults(func=_cmd_list)

    p = g.add_parser("show", help="one record: digests, results, calibrations used",
                     description="Show one record; its bytes are checked against the stored "
                                 "SHA-256.")
    p.add_argument("id", metavar="ID", help="record number (as 'list' shows it, with or "
                                            "without #)")
    add_book_options(p, wait=True)
    p.set_defaults(func=_cmd_show)

    p = g.add_parser("trend", help="the measurand against date, per chain, with the flags",
                     description="Weighted mean per chain with the generalised χ², E_n of each "
                                 "run against the running weighted mean of the other chain, "
                                 "and a step test at every recalibration; flags name the "
                                 "calibration.")
    p.add_argument("--measurand", metavar="NAME",
                   help="output to follow (default: delta_I, else the first starting with "
                        "'dev')")
    p.add_argument("--pdf", metavar="OUT", help="write the trend page (A4 PDF) to OUT")
    p.add_argument("--html", metavar="OUT", help="write the trend page (HTML) to OUT")
    p.add_argument("--json", metavar="OUT", help="write the trend, step tests and flags as JSON")
    add_force_option(p)
    add_book_options(p, wait=True)
    p.set_defaults(func=_cmd_trend)

    p = g.add_parser("export", help="every record back as files, byte-identical",
                     description="Write every record as it was added into DIR (new or empty) "
                                 "with a SHA256SUMS file.")
    p.add_argument("dir", metavar="DIR")
    add_book_options(p, wait=True)
    p.set_defaults(func=_cmd_export)


def _cmd_add(args) -> int:
    from ..logbook import add_files
    path, default = _book(args)
    ids = add_files(path, args.records, wait_s=_wait(args), create_folder=default)
    print(f"added {len(ids)} record{'' if len(ids) == 1 else 's'} to {path}: "
          + ", ".join(f"#{i}" for i in ids))
    return EXIT_OK


def _cmd_list(args) -> int:
    from ..outputs import check_writable
    from ..text import logbook_list_text
    if args.since and not _DATE.match(args.since):
        raise UsageError(f"must be a date YYYY-MM-DD; got {args.since!r}", field="--since")
    if args.json:
        check_writable(args.json, force=args.force, field="--json")
    with _open(args) as lb:
        entries = lb.entries(since=args.since, chain=args.chain)
        chains = {e.chain for e in lb.entries()} if args.chain and not entries else set()
    if args.chain and not entries and chains:
        raise UsageError(f"no chain '{args.chain}'{did_you_mean(args.chain, chains)} in the "
                         f"book (chains: {', '.join(sorted(chains))})", field="--chain")
    print(logbook_list_text(entries, str(lb.path)))
    if args.json:
        write_outputs((args.json, json.dumps([e.to_dict() for e in entries], indent=2,
                                             ensure_ascii=False, allow_nan=False) + "\n"),
                      force=args.force)
    return EXIT_OK


def _cmd_show(args) -> int:
    from ..text import logbook_show_text
    text = args.id.lstrip("#")
    if not text.isdigit():
        raise UsageError(f"must be a record number; got {args.id!r}", field="ID")
    with _open(args) as lb:
        print(logbook_show_text(lb.record(int(text))))
    return EXIT_OK


def _cmd_trend(args) -> int:
    from ..logbook import compute_trend
    from ..logbook.trend import elsewhere_note
    from ..outputs import check_writable
    from ..text import logbook_trend_text, main_measurand
    for out, opt in ((args.pdf, "--pdf"), (args.html, "--html"), (args.json, "--json")):
        if out:
            check_writable(out, force=args.force, field=opt)
    with _open(args) as lb:
        names = [n for n, _c in lb.measurand_counts()]
        name = args.measurand or main_measurand(names)
        if name is None:
            raise UsageError("the book holds no record yet", file=str(lb.path), field="book")
        if name not in names:
            raise UsageError(f"no measurand '{name}'{did_you_mean(name, names)} in the book "
                             f"(measurands: {', '.join(names)})", field="--measurand")
        trend = compute_trend(lb.series(name))
        note = elsewhere_note(trend, lb.entries())
        if note:
            trend = dataclasses.replace(trend, notes=(*trend.notes, note))
        book = lb.path.name          # the page names the book, not the folders above it
    print(logbook_trend_text(trend))
    outputs = []
    if args.json:
        outputs.append((args.json, json.dumps(trend.to_dict(), indent=2, ensure_ascii=False,
                                              allow_nan=False) + "\n"))
    if args.html or args.pdf:
        from .. import __version__
        from ..report.trend_render import trend_html, trend_pdf
        soft = f"qcs-budget {__version__}"
        if args.html:
            outputs.append((args.html, trend_html(trend, book=book, software=soft)))
        if args.pdf:
            outputs.append((args.pdf, trend_pdf(trend, book=book, software=soft)))
    write_outputs(*outputs, force=args.force)  # JSON, HTML and PDF: all or none
    return EXIT_OK


def _cmd_export(args) -> int:
    from ..logbook import export_book
    with _open(args) as lb:
        paths = export_book(lb, args.dir)
    print(f"exported {len(paths)} record{'' if len(paths) == 1 else 's'} to {args.dir} "
          "(with SHA256SUMS)")
    return EXIT_OK


def check_run_logbook(args):
    """For ``budget run --logbook``: refuse an unusable book before any work is done."""
    if not getattr(args, "logbook", False):
        return None
    from ..logbook import Logbook
    path, default = _book(args)
    if path.exists():
        with Logbook.open(path, write=True, wait_s=_wait(args)):
            pass                       # not a logbook, newer, read-only, locked: refused now
    elif not default and not path.parent.is_dir():
        raise UsageError("the folder of the book does not exist", file=str(path), field="--book")
    return path


def stage_run_record(args, budget, path, out) -> int:
    """Add the record ``budget run`` just computed to the book as part of the output set
    ``out`` (budget.staging.OutputSet): its row is committed with the files, after their
    renames, or not at all. Returns its number in the book (valid once ``out`` commits)."""
    from ..logbook import prepare, stage_add
    raw = budget.to_json().encode("utf-8")
    name = args.json or Path(args.spec).with_suffix(".json").name
    rec = prepare(raw, name, check_stated=False)
    ids, commit, rollback = stage_add(path, [rec], wait_s=_wait(args), create_folder=True)
    out.transaction(f"the logbook {path} (record #{ids[0]})", commit, rollback)
    return ids[0]
