"""``budget explain`` and ``budget compare``: reading a result for an auditor."""

from __future__ import annotations

import json
from pathlib import Path

from .. import __version__
from ..errors import UsageError
from .common import (
    EXIT_OK,
    add_force_option,
    number,
    positive_float,
    print_warnings,
    shown_output,
    write_outputs,
)


def add_explain(sub) -> None:
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
    p.add_argument("--full", action="store_true",
                   help="estimates and module diagnostics at full precision, every line")
    p.add_argument("--recalibrate", action="append", default=[], metavar="TERM=U",
                   help="what if TERM were recalibrated to standard uncertainty U (in the "
                        "term's unit); repeat for several")
    p.add_argument("--longer", type=positive_float, metavar="HOURS",
                   help="what if the on/off record ran HOURS longer (the Type A rows of the "
                        "cycles module, scaled from the record's own noise analysis)")
    p.add_argument("--against", metavar="OTHER.json",
                   help="show this budget and another record's side by side, term by term")
    add_force_option(p)
    p.set_defaults(func=_cmd_explain)


def _recalibrations(items: list[str]) -> dict[str, float]:
    out = {}
    for item in items:
        name, sep, value = item.partition("=")
        u = number(value.strip()) if sep else None
        if not name.strip() or u is None:
            raise UsageError(f"must be TERM=U with U a number; got {item!r}",
                             field="--recalibrate")
        out[name.strip()] = u
    return out


def _cmd_explain(args) -> int:
    from ..errors import ComputationError
    from ..explain import explain_term, overview
    from ..outputs import check_writable
    from ..record import load_record
    from ..text import explain_overview_text, explain_term_text
    if args.json:
        check_writable(args.json, force=args.force, field="--json")
    if args.against and args.json and Path(args.against).resolve() == Path(args.json).resolve():
        raise UsageError("would overwrite an input file", file=args.json, field="--json")
    if args.record:
        given = [x for x in (args.spec, args.term) if x]
        if len(given) > 1:
            raise UsageError("with --record give only TERM, not a spec", field="SPEC")
        b = load_record(args.record)
        term = given[0] if given else None
    else:
        if not args.spec:
            raise UsageError("give a SPEC file, or --record RESULT.json", field="SPEC")
        from ..engine import evaluate
        from ..spec import load_spec
        b = evaluate(load_spec(args.spec), monte_carlo_enabled=False)
        term = args.term
    recal = _recalibrations(args.recalibrate)
    other = load_record(args.against) if args.against else None
    if term is None:
        answer = overview(b, args.measurand)
        print(explain_overview_text(answer))
    else:
        answer = explain_term(b, term, args.measurand)
        print(explain_term_text(answer, full=args.full))
    extra = {}
    if recal or args.longer is not None:
        from ..explain import chosen_measurands
        from ..explain_whatif import scenarios
        from ..text import scenarios_text
        found = scenarios(b, chosen_measurands(b, args.measurand), recal, args.longer)
        print(scenarios_text(found))
        extra["scenarios"] = [x.to_dict() for x in found]
    if other is not None:
        from ..explain_diff import diff_budgets
        from ..text import diff_text
        d = diff_budgets(b, other, args.measurand)
        print("\n" + diff_text(d, args.record or args.spec, args.against))
        extra["against"] = d.to_dict()
    if args.json:
        try:
            text = json.dumps({**answer.to_dict(), **extra}, indent=2, ensure_ascii=False,
                              allow_nan=False)
        except ValueError:  # a module put inf/NaN in its diagnostics (its contract says None)
            raise ComputationError("the answer holds a non-finite number and cannot be "
                                   "written as JSON", file=args.json, field="--json") from None
        write_outputs((args.json, text + "\n"), force=args.force)
        print(f"\nanswer written to {shown_output(args.json)}")
    print_warnings(b)  # last: an error while writing stays the only line on stderr
    return EXIT_OK



def add_compare(sub) -> None:
    p = sub.add_parser("compare", help="compare runs: weighted mean, Birge ratio, E_n",
                       description="Compare result records of several runs: a table of runs, "
                                   "the weighted mean with internal and external uncertainty, "
                                   "Birge ratio, χ² and its p-value (generalised least "
                                   "squares with the runs' covariance), and E_n of each run "
                                   "against a reference or the weighted mean. A term is shared "
                                   "between records only when declared (shared_as) or, for "
                                   "module rows, systematic and from the same data file.")
    p.add_argument("records", nargs="*", metavar="RECORD.json", help="result records")
    p.add_argument("--reference", nargs="+", metavar="REF",
                   help="VALUE U (U with k = 2, in the measurand's unit) or a RECORD.json")
    p.add_argument("--measurand", metavar="NAME",
                   help="output to compare (default: the one named dev…, else the first)")
    p.add_argument("--pairwise", action="store_true", help="also E_n of every pair of runs")
    p.add_argument("--en-basis", choices=("stated", "2u"), default="stated",
                   help="U in E_n: each record's stated U with its own k (default, ISO 13528 "
                        "§9.7) or U = 2u for every result")
    p.add_argument("--pdf", metavar="OUT.pdf", help="write the comparison as a PDF")
    p.add_argument("--json", metavar="OUT", help="write the comparison as JSON")
    add_force_option(p)
    p.set_defaults(func=_cmd_compare)


def _cmd_compare(args) -> int:
    from ..compare import ReferenceValue, compare_runs
    from ..outputs import check_writable
    from ..record import load_record
    from ..text import compare_text
    records = list(args.records)
    reference, ref_file = None, None
    if args.reference:
        ref = list(args.reference)
        # argparse gives --reference every word after it; the words that do not belong to it
        # are further records
        if number(ref[0]) is not None:
            if len(ref) < 2 or number(ref[1]) is None:
                raise UsageError("--reference takes VALUE U (two numbers) or one RECORD.json",
                                 field="--reference")
            reference = ReferenceValue(number(ref[0]), number(ref[1]))
            records += ref[2:]
        else:
            ref_file = ref[0]
            records += ref[1:]
    for out, opt in ((args.pdf, "--pdf"), (args.json, "--json")):
        if out:
            check_writable(out, force=args.force, field=opt)
    runs = [load_record(f) for f in records]
    if ref_file is not None:
        reference = load_record(ref_file)
    if not runs:
        raise UsageError("give at least one RECORD.json", field="RECORD")
    c = compare_runs(runs, measurand=args.measurand, reference=reference,
                     pairwise=args.pairwise, files=records + ([ref_file] if ref_file else []),
                     en_basis=args.en_basis)
    print(compare_text(c, records))
    outputs = []
    if args.pdf:
        import datetime as _dt
        import hashlib

        from ..report.compare_render import compare_pdf
        labs = list(dict.fromkeys(str((r.run.get("report") or {}).get("laboratory", "")).strip()
                                  for r in runs))
        digest = hashlib.sha256()
        for f in records + ([ref_file] if ref_file else []):
            digest.update(hashlib.sha256(Path(f).read_bytes()).digest())
        outputs.append((args.pdf, compare_pdf(
            c, files=[Path(f).name for f in records], software=f"qcs-budget {__version__}",
            laboratory="; ".join(x for x in labs if x),
            identifier=f"CMP-{digest.hexdigest()[:12].upper()} (from the records' SHA-256)",
            date=_dt.datetime.now(_dt.UTC).date().isoformat())))
    if args.json:
        d = {"records": records, "reference_record": ref_file, **c.to_dict()}
        outputs.append((args.json, json.dumps(d, indent=2, ensure_ascii=False,
                                              allow_nan=False) + "\n"))
    write_outputs(*outputs, force=args.force)  # the PDF and the JSON: both or neither
    if args.pdf:
        print(f"\nPDF written to {shown_output(args.pdf)}")
    if args.json:
        print(f"\ncomparison written to {shown_output(args.json)}")
    return EXIT_OK
