"""Input module ``pump``: the pump's own error term δ_pump from its characterisation.

δ_pump = ⟨n⟩(operating point)/n − 1 (dimensionless) is what a model fitted to the pump's
characterisation data predicts: electrons missed or added per cycle, relative to the wanted n.
It is a **model extrapolation, not a measurement** — the data are typically resolved to ~1e-4
while the predicted error is far smaller — and the quantity's provenance says so. A model-
discrepancy allowance may be added as its own budget row.

Spec keys of ``[inputs.NAME]`` with ``module = "pump"``
-------------------------------------------------------
``file``                   CSV of characterisation data (relative to the spec), **or**
``fit_file``               a fit-result file (TOML, or JSON by suffix; format documented in
                           :mod:`budget.inputs.pump.fitfile`) from another fitting program.
``model``                  ``"decay-cascade"`` (plateau scan: columns ``gate_voltage`` [V],
                           ``n_mean``, optional ``n_std`` [electrons per cycle]) or
                           ``"sequential-escape"`` (escape record: ``hold_time_s`` [s],
                           ``n_mean`` = mean number ejected, optional ``gate_voltage`` [V],
                           ``n_std``). Required with ``file``; with ``fit_file`` it is read from
                           the file and, if given, must agree.
``plateau``                n, the wanted electrons per cycle (integer ≥ 1). Required with
                           ``file``; with ``fit_file`` it replaces the file's value.
``operating_point``        gate voltage of operation [V]. Required for the decay cascade and
                           for escape data with a gate_voltage column.
``hold_time``              hold time of operation [s] (sequential escape; required there).
``loaded``                 N, electrons loaded (sequential escape). Default: ⌈max n_mean − 0.25⌉,
                           at least n.
``steps``                  K, steps of the decay-cascade model. Default: ⌈max n_mean − 0.25⌉,
                           at least n + 1 (the upper edge of plateau n must be in the data).
``shared_slope``           one gate slope for all steps (cascade, default true) or for all
                           electrons (escape, default false: own b_k per electron).
``reference_voltage``      V_ref of τ_k(V) = τ_k0·exp(−b_k(V − V_ref)) [V]. Default: the
                           operating point (then τ_k0 are the escape times there).
``allow_extrapolation``    accept an operating point (gate voltage or hold time) outside the
                           data; default false. A note records the extrapolation.
``discrepancy_half_width`` half-width a of a rectangular model-discrepancy allowance on δ
                           (dimensionless). When given, the input is
                           ``NAME_fit + NAME_model`` with NAME_model rectangular on [−a, a].
``samples``                parameter samples for propagating Σ into δ (default 20000,
                           1000..10^7).
``seed``                   seed of the numpy Generator for those samples (default 20100430);
                           recorded in the provenance.
``max_evaluations``        fit budget in model evaluations (default 2000); a fit that needs
                           more is refused as not converged.
``temperatures``           optional CSV of escape rates at several temperatures
                           (``temperature_k`` [K], ``gate_voltage`` [V], ``escape_rate`` [1/s],
                           optional ``escape_rate_std``) for the thermal-activation check; the
                           verdict goes into the notes and diagnostics.

The estimate and standard uncertainty of δ are the mean and standard deviation of δ over
``samples`` parameter sets drawn from N(θ̂, Σ); the linear (GUM) propagation is reported beside
it, and a note says when the two differ by more than 5 %.
"""

from __future__ import annotations

import dataclasses
import math
from typing import Any

import numpy as np

from ...distributions import SAMPLED_POINTS, Distribution
from ...quantity import ModuleResult, Provenance, Quantity
from ...warnings import warn
from ..context import InputContext
from .analysis import MODELS, PumpAnalysis, add_thermal_check, analyse_data, analyse_fit_file
from .figdata import figure_data
from .fit import DEFAULT_SAMPLES, DEFAULT_SEED

__all__ = ["KEYS", "evaluate", "quantities_of", "json_ready"]

KEYS = frozenset({"file", "fit_file", "model", "plateau", "operating_point", "hold_time",
                  "loaded", "steps", "shared_slope", "reference_voltage", "allow_extrapolation",
                  "discrepancy_half_width", "samples", "seed", "max_evaluations",
                  "temperatures"})

_RAW_ONLY = ("loaded", "steps", "shared_slope", "reference_voltage", "max_evaluations")


def json_ready(x: Any) -> Any:
    """Plain-Python copy of ``x`` with numpy scalars unwrapped and inf/NaN as None."""
    if isinstance(x, dict):
        return {str(k): json_ready(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [json_ready(v) for v in x]
    if isinstance(x, (bool, np.bool_)):
        return bool(x)
    if isinstance(x, (int, np.integer)):
        return int(x)
    if isinstance(x, (float, np.floating)):
        return float(x) if math.isfinite(float(x)) else None
    return x


def evaluate(ctx: InputContext) -> ModuleResult:
    """Build δ_pump (and the allowance row, when asked) for ``[inputs.NAME]``."""
    t = ctx.table
    if "file" in t and "fit_file" in t:
        raise ctx.spec_error("fit_file", "give either 'file' (raw data) or 'fit_file' (a fit "
                                         "result), not both")
    if "file" not in t and "fit_file" not in t:
        raise ctx.spec_error("file", "is required: a data file, or fit_file with a fit result")

    def option_error(key, message):
        return ctx.spec_error(key, message)

    samples = ctx.option("samples", int, DEFAULT_SAMPLES, check=lambda n: 1000 <= n <= 10**7,
                         must="between 1000 and 10000000")
    seed = ctx.option("seed", int, DEFAULT_SEED, check=lambda n: n >= 0, must=">= 0")
    allow = ctx.option("allow_extrapolation", bool, False)
    half_width = ctx.number("discrepancy_half_width", None, positive=True)
    v_op = ctx.number("operating_point", None)
    hold = ctx.number("hold_time", None, positive=True)
    # Messages name a file as ctx.display shows it; the record (notes, source_file, fit record,
    # thermal check) names it relative to the spec's folder, as the FileRef does, so that
    # records do not depend on where the project is checked out.
    if "file" in t:
        path = ctx.path_of(ctx.option("file", str), "file")
        ref = ctx.file_ref(path)
        analysis = analyse_data(
            path, model=ctx.choice("model", MODELS),
            plateau=ctx.option("plateau", int, check=lambda n: n >= 1, must=">= 1"),
            operating_point=v_op, hold_time=hold,
            loaded=ctx.option("loaded", int, None, check=lambda n: 1 <= n <= 10,
                              must="between 1 and 10"),
            steps=ctx.option("steps", int, None, check=lambda n: 1 <= n <= 20,
                             must="between 1 and 20"),
            shared_slope=ctx.option("shared_slope", bool, None),
            reference_voltage=ctx.number("reference_voltage", None),
            allow_extrapolation=allow, samples=samples, seed=seed,
            max_evaluations=ctx.option("max_evaluations", int, 2000, check=lambda n: n >= 1,
                                       must=">= 1"),
            shown=ctx.display(path), option_error=option_error, recorded=ref.path)
    else:
        for key in _RAW_ONLY:
            if key in t:
                raise ctx.spec_error(key, "applies to fitting raw data ('file'); a fit-result "
                                          "file carries the model settings itself")
        path = ctx.path_of(ctx.option("fit_file", str), "fit_file")
        ref = ctx.file_ref(path)
        analysis = analyse_fit_file(
            path, plateau=ctx.option("plateau", int, None, check=lambda n: n >= 1, must=">= 1"),
            operating_point=v_op, hold_time=hold, allow_extrapolation=allow, samples=samples,
            seed=seed, shown=ctx.display(path), option_error=option_error, recorded=ref.path)
        if "model" in t:
            model = ctx.choice("model", MODELS)
            if model != analysis.model:
                raise ctx.spec_error("model", f"is {model!r} but {ctx.display(path)} holds a "
                                              f"{analysis.model!r} fit")
    extra_files = []
    if "temperatures" in t:
        tpath = ctx.path_of(ctx.option("temperatures", str), "temperatures")
        tref = ctx.file_ref(tpath)
        analysis = add_thermal_check(analysis, tpath, shown=ctx.display(tpath),
                                     recorded=tref.path)
        extra_files.append(dataclasses.replace(tref, rows=analysis.thermal.rows))
    refs = (dataclasses.replace(ref, rows=analysis.data.rows if analysis.data is not None
                                else ""), *extra_files)
    quantities, expression = quantities_of(analysis, ctx.name, half_width, refs)
    diagnostics = json_ready(analysis.to_dict())
    diagnostics["figures"] = json_ready(figure_data(analysis))
    return ModuleResult(quantities=quantities, expression=expression, diagnostics=diagnostics)


# analysis notes that change what δ means; the rest stay free-text notes
_NOTE_WARNINGS = (("extrapolated", "pump.extrapolation", "warning"),
                  ("no operating point given", "pump.default_operating_point", "note"),
                  ("plateau ", "pump.plateau_replaced", "note"),
                  ("successive escape times", "pump.degenerate_fit", "warning"))


def _no_allowance(half_width: float | None, model: str, name: str) -> tuple:
    """A warning when δ rests on the model alone: its u is the fit's, not the model's error."""
    if half_width is not None:
        return ()
    return (warn("pump.no_discrepancy_allowance",
                 f"{name}: δ is the {model} model's prediction and its u covers only the fit "
                 "parameters, not how far the pump departs from the model; state "
                 "discrepancy_half_width (a model-discrepancy allowance) or justify its absence",
                 input=name),)


def _warnings_of_notes(notes) -> tuple:
    out = []
    for n in notes:
        for prefix, code, severity in _NOTE_WARNINGS:
            if n.startswith(prefix):
                out.append(warn(code, n, severity=severity))
                break
    return tuple(out)


def quantities_of(analysis: PumpAnalysis, name: str, half_width: float | None,
                  files: tuple = ()) -> tuple[tuple[Quantity, ...], str | None]:
    """The budget quantities for an analysis: δ_pump, and the allowance row when asked.

    Returns the quantities and the expression combining them (None for a single quantity).
    """
    a, p, rec = analysis, analysis.prediction, analysis.record
    n = a.plateau
    where = []
    if a.point.get("gate_voltage") is not None:
        where.append(f"{a.point['gate_voltage']:g} V")
    if a.point.get("hold_time") is not None:
        where.append(f"hold time {a.point['hold_time']:g} s")
    at = " and ".join(where)
    fit_name = f"{name}_fit" if half_width is not None else name
    if a.fit is not None:
        how = (f"least-squares fit of the {a.model} model to {a.fit.n_points} points of "
               f"{a.source_file} ({a.fit.scale_reason})")
    else:
        how = f"{a.model} parameters and covariance read from the fit-result file {a.source_file}"
    method = (f"{how}; δ = ⟨n⟩/n − 1 on plateau {n} at {at}, propagated by drawing {p.samples} "
              f"parameter sets from N(θ̂, Σ) (numpy Generator, seed {p.seed}); estimate and u are "
              f"the mean and standard deviation of the sampled δ (δ at θ̂ = {p.best:.6g}; linear "
              f"propagation u = {p.linear_std:.3g})")
    if math.isinf(rec.dof):
        dof_reason = ("infinite: the n_std column is taken as the data's standard uncertainties "
                      "(no scaling by the scatter)") if a.fit is not None else \
            "infinite: the fit-result file states no degrees of freedom"
    else:
        dof_reason = (f"ν = {rec.dof:g}: degrees of freedom of the fit residuals (points − "
                      "parameters), which set the covariance scale")
    if p.draws is not None and p.std > 0:
        dist = Distribution.sampled(p.draws, mean=p.mean, sd=p.std)
        dist_reason = (f"the sampled distribution of δ itself, kept as its quantile function "
                       f"({SAMPLED_POINTS} quantiles of the {p.samples} samples) so that the "
                       f"Monte Carlo method draws its shape (skewness {p.skewness:.2g}; 95 % of "
                       f"samples in [{p.low_95:.3g}, {p.high_95:.3g}]); mean and standard "
                       "deviation as sampled (JCGM 101 §6.4.1, sampling by inversion)")
    else:
        dist = Distribution.normal(p.mean, p.std)
        dist_reason = (f"normal with the mean and standard deviation of the sampled δ "
                       f"(skewness {p.skewness:.2g}; 95 % of samples in "
                       f"[{p.low_95:.3g}, {p.high_95:.3g}])")
    q = Quantity(
        name=fit_name, value=p.mean, standard_uncertainty=p.std,
        distribution=dist, unit="1", dof=rec.dof, evaluation="A",
        description=(f"pump error δ = ⟨n⟩/n − 1 on plateau {n} at {at}, predicted by the "
                     f"{a.model} model (model extrapolation, not a measurement)"),
        provenance=Provenance(
            origin="module:pump", method=method,
            distribution_reason=dist_reason,
            dof_reason=dof_reason, files=tuple(files), notes=a.notes,
            warnings=_warnings_of_notes(a.notes) + _no_allowance(half_width, a.model, name)))
    if half_width is None:
        return (q,), None
    allowance = Quantity(
        name=f"{name}_model", value=0.0, standard_uncertainty=half_width / math.sqrt(3),
        distribution=Distribution.rectangular(-half_width, half_width), unit="1", dof=math.inf,
        evaluation="B",
        description=f"allowance for the discrepancy between the {a.model} model and the pump",
        provenance=Provenance(
            origin="module:pump",
            method=f"half-width {half_width:g} stated in the spec (discrepancy_half_width)",
            distribution_reason="rectangular: only bounds are stated (JCGM 100 §4.3.7)",
            dof_reason="infinite: a stated bound",
            notes=("an allowance chosen by the user for what the model may miss; not derived "
                   "from the data",)))
    return (q, allowance), f"{name}_fit + {name}_model"
