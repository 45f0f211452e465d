"""``budget pump fit``: pump characterisation from a plateau scan, escape record or fit file."""

from __future__ import annotations

from pathlib import Path

from ..errors import UsageError
from .common import (
    EXIT_OK,
    add_force_option,
    add_group,
    finite_float,
    int_arg,
    positive_float,
    seed_arg,
    shown_output,
    write_outputs,
)


def add_pump(sub) -> None:
    psub = add_group(sub, "pump",
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
    f.add_argument("--plateau", type=int_arg, metavar="N", help="wanted electrons per cycle "
                   "(default 1, or the fit file's)")
    f.add_argument("--operating-point", type=finite_float, metavar="V",
                   help="gate voltage of operation in V (default: the best one the fit predicts)")
    f.add_argument("--hold-time", type=positive_float, metavar="S",
                   help="hold time of operation in s (sequential escape)")
    f.add_argument("--loaded", type=int_arg, metavar="N", help="electrons loaded (sequential escape)")
    f.add_argument("--steps", type=int_arg, metavar="K", help="steps of the decay-cascade model")
    slope = f.add_mutually_exclusive_group()
    slope.add_argument("--shared-slope", dest="shared_slope", action="store_true", default=None,
                       help="one gate slope for all steps/electrons")
    slope.add_argument("--separate-slopes", dest="shared_slope", action="store_false",
                       help="one gate slope per step/electron")
    f.add_argument("--reference-voltage", type=finite_float, metavar="V",
                   help="V_ref of the escape times (default: the operating point)")
    f.add_argument("--allow-extrapolation", action="store_true",
                   help="accept an operating point outside the data")
    f.add_argument("--samples", type=int_arg, metavar="N", default=20000,
                   help="parameter samples for the uncertainty of δ (default 20000)")
    f.add_argument("--seed", type=seed_arg, metavar="S", default=20100430,
                   help="seed of those samples (default 20100430)")
    f.add_argument("--temperatures", metavar="FILE",
                   help="escape rates at several temperatures (temperature_k, gate_voltage, "
                        "escape_rate[, escape_rate_std]) for the thermal-activation check")
    f.add_argument("--figures", metavar="DIR", help="write the figures as SVG files into DIR")
    f.add_argument("--write-fit", metavar="FILE",
                   help="write the fit-result file (JSON if FILE ends in .json, else TOML)")
    add_force_option(f)
    f.set_defaults(func=_cmd_pump_fit)


def _cmd_pump_fit(args) -> int:
    from ..inputs.pump.analysis import add_thermal_check, analyse_data, analyse_fit_file
    from ..inputs.pump.figdata import figure_data
    from ..inputs.pump.fitfile import fit_file_text
    from ..outputs import check_writable
    from ..text.pump_text import fit_report

    def option_error(key, message):
        return UsageError(message, field="--" + key.replace("_", "-"))

    data = Path(args.data)
    if not data.is_file():
        raise UsageError("file not found", file=args.data, field="DATA")
    # missing output folders are created when the outputs are written (README "budget pump
    # fit"); here only that they can be: the nearest existing ancestor is a folder
    fit_folders = _folders_to_create(Path(args.write_fit).parent, "--write-fit") \
        if args.write_fit else []
    if args.write_fit and not fit_folders:
        check_writable(args.write_fit, force=args.force, field="--write-fit")
    fig_folders = _folders_to_create(Path(args.figures), "--figures") if args.figures else []
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
        from ..report.figures import module_figure
        figures = [(Path(args.figures) / f"{fig['id']}.svg", module_figure(fig, fig["id"]))
                   for fig in figure_data(a)]
    print(fit_report(a), end="")
    outputs = list(figures)
    if args.write_fit:
        fmt = "json" if args.write_fit.lower().endswith(".json") else "toml"
        outputs.append((args.write_fit, fit_file_text(a.record, fmt)))
    made = _make_folders(fit_folders + [f for f in fig_folders if f not in fit_folders])
    try:
        if args.write_fit and fit_folders:
            check_writable(args.write_fit, force=args.force, field="--write-fit")
        for p, _ in figures:
            check_writable(p, force=args.force, field="--figures")
        write_outputs(*outputs, force=args.force)  # the fit file and the figures: all or none
    except BaseException:
        for folder in reversed(made):           # only the empty folders this run created
            try:
                folder.rmdir()
            except OSError:
                pass
        raise
    if args.write_fit:
        print(f"\nfit result written to {shown_output(args.write_fit)}")
    if figures:
        print(f"figures written to {args.figures}: " + ", ".join(p.name for p, _ in figures))
    return EXIT_OK


def _folders_to_create(folder: Path, field: str) -> list[Path]:
    """The missing folders from the nearest existing ancestor down to ``folder`` (outermost
    first); UsageError when that ancestor, or ``folder`` itself, is not a folder."""
    missing = []
    p = folder if str(folder) else Path(".")
    while not p.exists():
        missing.append(p)
        if p.parent == p:
            break
        p = p.parent
    if p.exists() and not p.is_dir():
        raise UsageError("is not a folder", file=str(p), field=field)
    return list(reversed(missing))


def _make_folders(folders: list[Path]) -> list[Path]:
    """Create ``folders`` (outermost first); return the ones this call created."""
    made = []
    for f in folders:
        try:
            f.mkdir()
        except FileExistsError:
            continue
        except OSError as exc:
            for g in reversed(made):
                g.rmdir()
            raise UsageError(f"cannot create the folder ({exc.strerror})", file=str(f),
                             field="output") from None
        made.append(f)
    return made
