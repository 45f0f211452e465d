"""Evaluate a spec: inputs → quantities → model → LPU and Monte Carlo → Budget."""

from __future__ import annotations

import math
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from . import __version__, cross_checks
from . import expression as ex
from .engine_mc import monte_carlo_outcomes
from .errors import BudgetError, ComputationError, SpecError, did_you_mean
from .inputs import InputContext, run_module
from .inputs.direct import evaluate_direct, observations_of
from .model import Model, build_model
from .model_units import apply_units
from .propagate import McmSettings, monte_carlo, propagate_linear
from .propagate.lpu import correlation_groups, coverage_factor
from .propagate.mcm import adaptive_batch_size
from .quantity import Quantity
from .result import Budget, Measurand, MonteCarlo, Term
from .spec import Spec, check_trials
from .warnings import Warning, unique, warn, with_input

__all__ = ["evaluate", "resolve_inputs", "ResolvedInputs"]

_MAX_DERIVATIVE_TEXT = 4000  # characters; longer derivatives are left out of the record
# Writing out every ∂f/∂x costs (inputs used) × (nodes of the model): quadratic in the number of
# inputs for a model that names each once. Above this many node visits the record leaves the
# texts out (the sensitivities come from the exact forward-mode derivative either way) and
# `budget explain` writes out the one asked for, on demand.
_MAX_DERIVATIVE_WORK = 200_000


class ResolvedInputs:
    """The quantities of a spec, their correlation matrix and the module expressions."""

    def __init__(self, quantities: list[Quantity], corr: np.ndarray,
                 inlined: dict[str, ex.Node], modules: dict[str, dict[str, Any]],
                 pairs: list[tuple[str, str, float]], notes: list[str],
                 dof_groups: list[list[str]] | None = None,
                 warnings: list[Warning] | None = None):
        self.quantities, self.corr, self.inlined = quantities, corr, inlined
        self.modules, self.pairs, self.notes = modules, pairs, notes
        self.dof_groups = dof_groups or []   # estimation groups for ν_eff
        self.warnings = list(warnings or [])


def resolve_inputs(spec: Spec) -> ResolvedInputs:
    """Evaluate every ``[inputs.NAME]`` (typed in or through its module) and the correlations."""
    quantities: list[Quantity] = []
    inlined: dict[str, ex.Node] = {}
    modules: dict[str, dict[str, Any]] = {}
    module_pairs: list[tuple[str, str, float]] = []
    owner: dict[str, str] = {}
    dof_groups: list[list[str]] = []   # estimation groups for ν_eff (propagate.lpu)
    found: list[Warning] = []
    unstated: set[str] = set()   # typed-in inputs without a unit: dimension not checked
    module_units: dict[str, str] = {}   # module input -> unit of its combining expression
    for name, table in spec.inputs.items():
        ctx = InputContext(name=name, table=table, folder=spec.folder, spec_file=spec.path,
                           lines=spec.lines.get(("inputs", name), {}))
        if "module" in table:
            res = run_module(ctx)
            qs = list(res.quantities)
            if res.expression is None:
                if len(qs) != 1 or qs[0].name != name:  # pragma: no cover - module contract
                    raise SpecError(f"module returned {[q.name for q in qs]} without an "
                                    "expression", file=spec.path, field=f"inputs.{name}")
            else:
                tree = ex.parse(res.expression, field=f"inputs.{name}", file=spec.path)
                missing = ex.names(tree) - {q.name for q in qs} - set(spec.constants)
                if missing:  # pragma: no cover - module contract
                    raise SpecError(f"module expression uses unknown {sorted(missing)}",
                                    file=spec.path, field=f"inputs.{name}")
                inlined[name] = tree
                if res.unit is not None:
                    module_units[name] = res.unit
            module_pairs.extend(res.correlations)
            dof_groups.extend(_module_dof_groups(qs, res.correlations))
            found.extend(with_input(res.warnings, name))
            if table["module"] == "cycles" and "unit" not in table:
                # the reading's unit defaults to V without being stated: not checked
                unstated.update(q.name for q in qs)
            modules[name] = {"module": table["module"], "expression": res.expression,
                             "quantities": [q.name for q in qs],
                             "diagnostics": res.diagnostics}
        else:
            qs = [evaluate_direct(ctx)]
            if "unit" not in table:
                unstated.add(name)
        for q in qs:
            if q.name in owner or q.name in spec.constants or q.name in spec.outputs:
                raise SpecError(f"the name '{q.name}' is defined twice (by [inputs.{name}] and "
                                f"{owner.get(q.name, 'another section')})", file=spec.path,
                                line=ctx.line, field=f"inputs.{name}")
            owner[q.name] = f"[inputs.{name}]"
            quantities.append(q)
            found.extend(with_input(q.provenance.warnings, name))

    index = {q.name: i for i, q in enumerate(quantities)}
    n = len(quantities)
    corr = np.eye(n)
    set_by: dict[tuple[int, int], float] = {}
    pairs: list[tuple[str, str, float]] = []
    line = spec.line_of(("correlations",), "pairs")

    def put(a: str, b: str, r: float, fld: str, ln: int | None) -> None:
        for x in (a, b):
            if x not in index:
                raise SpecError(f"'{x}' is not an input{did_you_mean(x, index)}",
                                file=spec.path, line=ln, field=fld)
        if a == b:
            raise SpecError(f"a correlation of '{a}' with itself is always 1", file=spec.path,
                            line=ln, field=fld)
        if not (math.isfinite(r) and -1 <= r <= 1):
            raise SpecError(f"r('{a}', '{b}') must lie in [-1, 1]; got {r!r}", file=spec.path,
                            line=ln, field=fld)
        i, j = sorted((index[a], index[b]))
        if (i, j) in set_by and set_by[(i, j)] != r:
            raise SpecError(f"r('{a}', '{b}') is given twice with different values "
                            f"({set_by[(i, j)]!r} and {r!r})", file=spec.path, line=ln, field=fld)
        set_by[(i, j)] = r
        corr[i, j] = corr[j, i] = r
        if r != 0:
            pairs.append((a, b, r))

    for a, b, r in spec.correlation_pairs:
        put(a, b, r, "correlations.pairs", line)
    for a, b, r in module_pairs:
        put(a, b, r, "inputs", None)
    obs_line = spec.line_of(("correlations",), "from_observations")
    for group in spec.from_observations:
        series = []
        for name in group:
            table = spec.inputs.get(name)
            if table is None:
                raise SpecError(f"'{name}' is not an input{did_you_mean(name, spec.inputs)}",
                                file=spec.path, line=obs_line, field="correlations.from_observations")
            ctx = InputContext(name=name, table=table, folder=spec.folder, spec_file=spec.path)
            obs = observations_of(ctx)
            if obs is None:
                raise SpecError(f"'{name}' has no observations to correlate", file=spec.path,
                                line=obs_line, field="correlations.from_observations")
            series.append(obs)
        sizes = {s.size for s in series}
        if len(sizes) != 1:
            raise SpecError(f"simultaneous observations must be equally many; got "
                            f"{[s.size for s in series]} for {list(group)}", file=spec.path,
                            line=obs_line, field="correlations.from_observations")
        # JCGM 100 eq. (17): r(q̄, r̄) = s(q̄, r̄) / (s(q̄) s(r̄)), the same as r of the series
        r_obs = np.corrcoef(np.vstack(series))
        for i in range(len(group)):
            for j in range(i + 1, len(group)):
                put(group[i], group[j], float(r_obs[i, j]), "correlations.from_observations",
                    obs_line)
    _check_psd(corr, [q.name for q in quantities], spec)
    # simultaneous observations are one sample: their joint variance has ν = n − 1 exactly
    dof_groups.extend(list(g) for g in spec.from_observations)
    out = ResolvedInputs(quantities, corr, inlined, modules, pairs, [], dof_groups,
                         unique(found))
    out.unstated, out.module_units = unstated, module_units
    return out


def _module_dof_groups(qs: list[Quantity], correlations) -> list[list[str]]:
    """Quantities of one module linked by its correlations and sharing one finite ν: one fit's
    residual scale, so one estimation group for ν_eff (budget.propagate.lpu.effective_dof)."""
    by_name = {q.name: q for q in qs}
    groups: list[set[str]] = []
    for a, b, r in correlations:
        if r == 0 or a not in by_name or b not in by_name:
            continue
        if not (math.isfinite(by_name[a].dof) and by_name[a].dof == by_name[b].dof):
            continue
        hit = [g for g in groups if a in g or b in g]
        merged = set().union({a, b}, *hit)
        groups = [g for g in groups if g not in hit] + [merged]
    return [sorted(g) for g in groups]


def _check_psd(corr: np.ndarray, names: list[str], spec: Spec) -> None:
    # block by block (the connected groups of correlated inputs): a block-diagonal matrix is
    # positive semi-definite when each block is, and 1000 uncorrelated inputs then cost no
    # 1000 × 1000 eigendecomposition
    worst_w, worst = 0.0, []
    for comp in correlation_groups(corr):
        if len(comp) < 2:
            continue
        w, v = np.linalg.eigh(corr[np.ix_(comp, comp)])
        if w[0] < min(worst_w, -1e-9):
            c = np.abs(v[:, 0])
            worst_w = float(w[0])
            worst = [names[comp[i]] for i in np.argsort(c)[::-1][:3] if c[i] > 0.1]
    if worst_w < -1e-9:
        raise SpecError("the correlation matrix is not positive semi-definite (smallest "
                        f"eigenvalue {worst_w:.3g}); the inconsistent coefficients involve "
                        f"{', '.join(repr(x) for x in worst)}", file=spec.path,
                        line=spec.line_of(("correlations",)), field="correlations")


def evaluate(spec: Spec, *, trials: int | None | str = "spec", seed: int | None = None,
             monte_carlo_enabled: bool | None = None,
             progress: Callable[[int, int], None] | None = None,
             sampling: str | None = None) -> Budget:
    """Evaluate a loaded spec into a Budget.

    Parameters
    ----------
    spec : Spec
    trials : int, None or "spec"
        Monte Carlo trials: an integer, None for adaptive, or "spec" (default) for the spec's
        own setting.
    seed : int, optional
        Overrides the spec's seed. When neither gives one, a fresh seed is drawn and recorded.
    monte_carlo_enabled : bool, optional
        Overrides ``[monte_carlo] enabled``.
    sampling : {"random", "sobol"}, optional
        Overrides ``[monte_carlo] sampling`` (a recomputation uses the record's). Unset in
        both: "sobol" for the adaptive procedure, "random" for a fixed number of trials.
    progress : callable, optional
        ``progress(done, total)`` during Monte Carlo.
    """
    resolved = resolve_inputs(spec)
    qs = resolved.quantities
    model = build_model(spec.outputs, quantities={q.name for q in qs}, constants=spec.constants,
                        inlined=resolved.inlined, file=spec.path,
                        lines=spec.lines.get(("model",), {}))
    # dimensions checked and display units applied once, on the trees (budget.model_units)
    model, labels = apply_units(spec, model, qs, resolved.unstated, resolved.inlined,
                                resolved.module_units)
    notes = list(resolved.notes)
    warnings = list(resolved.warnings)
    used = set().union(*(model.uses(o) for o in model.outputs))
    unused = [q.name for q in qs if q.name not in used]
    if unused:
        notes.append("inputs not used by any output: " + ", ".join(unused))
    try:
        lin, cov = propagate_linear(model, qs, resolved.corr,
                                    coverage_probability=spec.coverage_probability,
                                    order=spec.propagation_order, dof_rounding=spec.dof_rounding,
                                    fixed_k=spec.coverage_factor,
                                    dof_groups=resolved.dof_groups)
    except BudgetError as exc:
        raise _at_spec(exc, spec) from None
    measurands = tuple(_measurand(spec, model, lin[o], qs, labels) for o in model.outputs)
    long = [m.name for m in measurands if m.terms and not any(t.derivative for t in m.terms)]
    if long:
        notes.append(f"{', '.join(long)}: the model is too large for every ∂f/∂x to be written "
                     "out in the record (the sensitivity coefficients are the exact derivatives "
                     "all the same); `budget explain` writes out the one asked for")
    # A first-order term that vanishes at the estimates (Y = X² or abs(X) at X = 0) drops an
    # uncertain input from u_c without a trace; say so rather than let u_c look exact.
    for m in measurands:
        flat = [t.name for t in m.terms if t.sensitivity == 0.0 and t.standard_uncertainty > 0]
        if flat:
            notes.append(f"{m.name}: the sensitivity coefficient of {', '.join(flat)} is zero at "
                         "the input estimates, so the linear propagation gives "
                         f"{'it' if len(flat) == 1 else 'them'} no first-order contribution; "
                         + ("check with propagation_order = 2 or the Monte Carlo result"
                            if spec.propagation_order == 1 else
                            "the second-order terms are included; compare with Monte Carlo"))
            warnings.append(warn("model.zero_sensitivity", notes[-1],
                                 severity="warning" if spec.propagation_order == 1 else "note"))
    notes.extend(_propagation_notes(spec, qs, resolved))
    notes.extend(_dof_rounding_notes(spec, measurands))
    sd = np.sqrt(np.clip(np.diag(cov), 0, None))
    with np.errstate(divide="ignore", invalid="ignore"):
        cm = np.where(np.outer(sd, sd) > 0, cov / np.outer(sd, sd), 0.0)
    np.fill_diagonal(cm, 1.0)

    enabled = spec.monte_carlo_enabled if monte_carlo_enabled is None else monte_carlo_enabled
    n_trials = spec.trials if trials == "spec" else trials
    if isinstance(n_trials, int):
        check_trials(n_trials, field="--trials")
    if seed is None:
        seed = spec.seed
    if seed is None:
        seed = int(np.random.SeedSequence().entropy % (2 ** 63))
    mcs: tuple[MonteCarlo, ...] = ()
    sampling = sampling or spec.sampling or ("sobol" if n_trials is None else "random")
    if enabled and sampling == "sobol" and isinstance(n_trials, int) and \
            n_trials & (n_trials - 1):
        raise SpecError("must be a power of two with sampling = \"sobol\" (the balance of Sobol "
                        f"points holds for 2^k of them), e.g. {1 << (n_trials - 1).bit_length():,}"
                        f"; got {n_trials:,}", file=spec.path if trials == "spec" else None,
                        line=spec.line_of(("monte_carlo",), "trials") if trials == "spec" else None,
                        field="monte_carlo.trials" if trials == "spec" else "--trials")
    if enabled and n_trials is None and spec.max_trials < adaptive_batch_size(
            spec.coverage_probability, sampling):
        # the adaptive procedure runs whole batches: a cap below one batch would be overrun by
        # the first batch while the notes claimed the run stopped at the cap
        raise SpecError("must be at least one adaptive batch, M = "
                        + ("the power of two ≥ " if sampling == "sobol" else "")
                        + f"max(⌈100/(1 − p)⌉, 10⁴) = "
                        f"{adaptive_batch_size(spec.coverage_probability, sampling):,} "
                        "trials (JCGM 101 §7.9.4"
                        + ("; sampling = \"sobol\"" if sampling == "sobol" else "")
                        + f"); got {spec.max_trials:,}", file=spec.path,
                        line=spec.line_of(("monte_carlo",), "max_trials"),
                        field="monte_carlo.max_trials")
    if enabled:
        settings = McmSettings(trials=n_trials, seed=seed,
                               coverage_probability=spec.coverage_probability,
                               significant_digits=spec.significant_digits,
                               max_trials=spec.max_trials,
                               t_for_finite_dof=spec.t_for_finite_dof,
                               interval=spec.interval, sampling=sampling)
        try:
            mres = monte_carlo(model, qs, resolved.corr, settings, progress=progress,
                               intervals={m.name: (m.value - m.expanded_uncertainty,
                                                   m.value + m.expanded_uncertainty)
                                          for m in measurands},
                               linear_u={m.name: m.standard_uncertainty for m in measurands})
        except BudgetError as exc:
            raise _at_spec(exc, spec) from None
        out, mc_notes, mc_warnings = monte_carlo_outcomes(spec, measurands, mres, qs)
        notes.extend(mc_notes)
        warnings.extend(mc_warnings)
        mcs = tuple(out)
        if sampling == "sobol":
            notes.append("Monte Carlo by randomized quasi-Monte Carlo: scrambled Sobol points, an "
                         "independent scramble per batch, inverse distribution functions; JCGM "
                         "101 describes pseudo-random sampling, against which this option is "
                         "checked (sampling = \"random\" gives that)")
        if any(q.distribution.kind != "normal" for q in qs if not q.is_constant and any(
                q.name in p[:2] for p in resolved.pairs)):
            notes.append("correlated non-Gaussian inputs were sampled through a Gaussian copula")

    files = {}
    for q in qs:
        for f in q.provenance.files:
            files[f.path] = f.sha256
    run = {
        "description": spec.description,
        "spec_file": Path(spec.path).name,
        "spec_sha256": spec.sha256,
        "software": f"qcs-budget {__version__}",
        "seed": seed,
        "trials_setting": "adaptive" if n_trials is None else n_trials,
        "monte_carlo_enabled": enabled,
        "coverage_probability": spec.coverage_probability,
        "propagation_order": spec.propagation_order,
        "dof_rounding": spec.dof_rounding,
        "coverage_factor_fixed": spec.coverage_factor,
        "significant_digits": spec.significant_digits,
        "t_for_finite_dof": spec.t_for_finite_dof,
        "sampling": sampling,
        "chain": spec.chain, "outputs": spec.output_info, "input_symbols": spec.input_info,
        "model": dict(spec.outputs),
        "constants": dict(model.constants),
        "report": dict(spec.report),
        "input_correlations": [[a, b, r] for a, b, r in resolved.pairs],
        "dof_groups": [list(g) for g in resolved.dof_groups],
        "modules": resolved.modules,
        "files": [{"path": p, "sha256": h} for p, h in sorted(files.items())],
        "notes": notes,
    }
    warnings = cross_checks.after_propagation(warnings, spec, model, qs, resolved, measurands)
    return Budget(title=spec.title, measurands=measurands,
                  correlation_names=model.outputs,
                  correlation_matrix=tuple(tuple(float(x) for x in row) for row in cm),
                  monte_carlo=mcs, inputs=tuple(qs), run=run, warnings=unique(warnings))


def _propagation_notes(spec: Spec, qs: list[Quantity], resolved: ResolvedInputs) -> list[str]:
    """Say which of the less obvious propagation rules of budget.propagate.lpu were used."""
    out = []
    by_name = {q.name: q for q in qs}
    finite = sorted({n for a, b, _ in resolved.pairs for n in (a, b)
                     if math.isfinite(by_name[n].dof)})
    if finite:
        grouped = [g for g in resolved.dof_groups if len(g) > 1]
        out.append("ν_eff with correlated inputs of finite ν (" + ", ".join(finite) + "): "
                   "Welch–Satterthwaite generalised, each estimation group weighted by its part "
                   "of u_c², u_c⁴/ν_eff = Σ_g w_g²/ν_g; an input an output does not use takes no "
                   "part" + ("; estimated together from one sample: " + "; ".join(
                       ", ".join(g) for g in grouped) if grouped else ""))
    if spec.propagation_order == 2:
        odd = sorted(q.name for q in qs if not q.is_constant and q.distribution.kind != "normal")
        if odd:
            out.append("second-order terms use each input's own skewness and kurtosis (the "
                       "JCGM 100 §5.1.2 note assumes normal inputs): " + ", ".join(odd))
    return out


def _at_spec(exc: BudgetError, spec: Spec) -> BudgetError:
    """Locate an error raised while propagating at the spec line of the field it names."""
    line = None
    if exc.field and exc.field.startswith("model."):
        line = spec.line_of(("model",), exc.field.split(".", 1)[1])
    elif exc.field and exc.field.startswith("budget."):
        line = spec.line_of(("budget",), exc.field.split(".", 1)[1])
    return exc.located(file=spec.path, line=line)


def _dof_rounding_notes(spec: Spec, measurands) -> list[str]:
    """Say what the other reading of a fractional ν_eff would give when it matters.

    JCGM 100 G.6.4 (and G.4.1 note 1) lets a fractional ν_eff be truncated to the next lower
    integer or interpolated in Table G.2; both conform. Where the two k differ by more than
    1 % (small ν_eff), the note states both, so that an auditor sees the choice."""
    if spec.coverage_factor is not None:
        return []
    out = []
    other = "interpolate" if spec.dof_rounding == "floor" else "floor"
    for m in measurands:
        nu = m.effective_dof
        if not (math.isfinite(nu) and nu > 0) or abs(nu - round(nu)) < 1e-9:
            continue
        k_other = coverage_factor(m.coverage_probability, nu, other)
        if abs(k_other / m.coverage_factor - 1) <= 0.01:
            continue
        p = f"{100 * m.coverage_probability:g} %"
        if spec.dof_rounding == "floor":
            out.append(f"{m.name}: ν_eff = {nu:.1f} truncated to {max(1, math.floor(nu))} "
                       f"(JCGM 100 G.6.4 allows truncating or interpolating): k = "
                       f"{m.coverage_factor:.3g} at {p}; the fractional ν gives k = "
                       f"{k_other:.3g} (dof_rounding = \"interpolate\")")
        else:
            out.append(f"{m.name}: ν_eff = {nu:.1f} used as it is (dof_rounding = "
                       f"\"interpolate\", JCGM 100 G.6.4): k = {m.coverage_factor:.3g} at "
                       f"{p}; truncating to {max(1, math.floor(nu))} gives k = {k_other:.3g}")
    return out


def _measurand(spec: Spec, model: Model, lr, qs: list[Quantity],
               labels: dict[str, str]) -> Measurand:
    tree = model.trees[lr.name]
    used = ex.names(tree)
    by_name = {q.name: q for q in qs}
    terms = []
    write_out = len(used) * ex.size(tree) <= _MAX_DERIVATIVE_WORK
    for i, name in enumerate(lr.names):
        if name not in used:
            continue
        q = by_name[name]
        try:
            d = ex.to_text(ex.diff(tree, name)) if write_out else ""
        except RecursionError:  # pragma: no cover - enormous models
            d = ""
        terms.append(Term(name=name, value=q.value, standard_uncertainty=q.standard_uncertainty,
                          unit=q.unit, distribution=q.distribution.kind, dof=q.dof,
                          sensitivity=float(lr.sensitivities[i]),
                          contribution=float(abs(lr.contributions[i])),
                          variance_share=float(lr.variance_shares[i]),
                          evaluation=q.evaluation,
                          derivative=d if len(d) <= _MAX_DERIVATIVE_TEXT else ""))
    if not math.isfinite(lr.standard_uncertainty):  # pragma: no cover - guarded upstream
        raise ComputationError("combined standard uncertainty is not finite",
                               field=f"model.{lr.name}")
    return Measurand(name=lr.name, unit=labels.get(lr.name, ""), value=lr.value,
                     standard_uncertainty=lr.standard_uncertainty,
                     effective_dof=lr.effective_dof, coverage_factor=lr.coverage_factor,
                     coverage_probability=lr.coverage_probability,
                     expanded_uncertainty=lr.expanded_uncertainty, terms=tuple(terms),
                     expression=spec.outputs[lr.name],
                     second_order_variance=lr.second_order_variance,
                     coverage_probability_of_k=lr.coverage_probability_of_k)

