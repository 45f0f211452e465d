"""Answers for the auditor: where each number of a budget comes from.

Free functions of a :class:`~budget.result.Budget` (freshly evaluated or read back from its JSON
record with :func:`budget.record.load_record`):

* :func:`overview` — every term of every measurand, sorted by its share of u_c²;
* :func:`explain_term` — a fixed-section answer for one term: what it is, estimate, standard
  uncertainty and distribution (and why), ν (and why), the sensitivity coefficient (the partial
  derivative written out, and its value), contribution and share, evaluation type, source files
  with rows and digests, the owning input module's diagnostics, and what-if lines;
* :func:`combine_terms` — u_c, ν_eff, k and U recomputed from a measurand's terms with some
  uncertainties scaled or removed (the what-if lines).

The what-if recomputation repeats exactly what :mod:`budget.propagate.lpu` does, from the
record alone: u_c² = (c·u)ᵀ r (c·u) + (second-order variance), with r the input correlations of
``run.input_correlations``; ν_eff by :func:`budget.propagate.lpu.effective_dof` over the
estimation groups of ``run.dof_groups`` (inputs with c = 0 take no part; a record without that
key has no groups);
k = t_p(ν_eff) by :func:`budget.propagate.lpu.coverage_factor` with the record's ``dof_rounding``,
unless the spec fixed k. A halved term keeps its ν; a removed term is dropped like a constant.
The second-order variance (``propagation_order = 2``) cannot be rescaled from the record and is
kept as it is; the answer says so when it is non-zero.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from . import expression as ex
from .errors import BudgetError, UsageError, did_you_mean
from .propagate.lpu import coverage_factor, effective_dof, estimation_groups
from .quantity import FileRef
from .record import finite_number
from .result import Budget, Measurand, Term, dof_out

__all__ = ["Recomputed", "combine_terms", "TermRow", "chosen_measurands",
           "MeasurandOverview", "Overview", "overview", "TermAnswer", "Explanation",
           "explain_term"]

_REL_TOL = 1e-9   # a record's stored numbers and their recomputation agree to rounding noise


# --------------------------------------------------------------------------- recomputation
@dataclass(frozen=True)
class Recomputed:
    """u_c, ν_eff, k and U of a measurand recomputed from its terms (in the measurand's unit)."""

    label: str
    standard_uncertainty: float
    effective_dof: float
    coverage_factor: float
    expanded_uncertainty: float
    relative_change: float | None = None   # (U − U_as_evaluated)/U_as_evaluated

    def to_dict(self) -> dict[str, Any]:
        return {"label": self.label, "standard_uncertainty": self.standard_uncertainty,
                "effective_dof": dof_out(self.effective_dof),
                "coverage_factor": self.coverage_factor,
                "expanded_uncertainty": self.expanded_uncertainty,
                "relative_change": self.relative_change}


def correlation_matrix(names: list[str], run: Mapping[str, Any]) -> np.ndarray:
    """Correlation matrix over ``names`` from the record's ``run.input_correlations``."""
    idx = {n: i for i, n in enumerate(names)}
    r = np.eye(len(names))
    for a, b, rho in run.get("input_correlations", []):
        if a in idx and b in idx:
            r[idx[a], idx[b]] = r[idx[b], idx[a]] = float(rho)
    return r


def combine_terms(budget: Budget, measurand: Measurand,
                  factors: Mapping[str, float] | None = None, label: str = "as evaluated",
                  dofs: Mapping[str, float] | None = None) -> Recomputed:
    """Recompute u_c, ν_eff, k and U with some input uncertainties scaled.

    Parameters
    ----------
    budget : Budget
        Supplies the input correlations, every input's ν and the k settings (``run``).
    measurand : Measurand
    factors : mapping, optional
        Term name -> factor on its standard uncertainty (0 removes the term). Default none.
    label : str
        Name of the scenario. Default "as evaluated".
    dofs : mapping, optional
        Term name -> its ν in the scenario (a longer series of observations). Default none.
    """
    factors = dict(factors or {})
    run = budget.run
    c = {t.name: t.sensitivity for t in measurand.terms}
    # Every uncertain input takes part, with c = 0 where this output does not use it (such an
    # input adds nothing to u_c² or to ν_eff, but keeps the estimation groups whole).
    pool = [(q.name, q.standard_uncertainty, q.dof) for q in budget.inputs if not q.is_constant]
    known = {p[0] for p in pool}
    pool += [(t.name, t.standard_uncertainty, t.dof) for t in measurand.terms if t.name not in known]
    pool = [p for p in pool if factors.get(p[0], 1.0) != 0.0]
    names = [p[0] for p in pool]
    cu = np.array([c.get(n, 0.0) * u * factors.get(n, 1.0) for n, u, _ in pool])
    dof = np.array([(dofs or {}).get(n, nu) for n, _, nu in pool])
    r = correlation_matrix(names, run)
    r_cu = r @ cu
    var = float(cu @ r_cu) + measurand.second_order_variance
    nu = effective_dof(cu, r_cu, dof, var, estimation_groups(names, run.get("dof_groups", [])))
    fixed = run.get("coverage_factor_fixed")
    k = float(fixed) if fixed is not None else coverage_factor(
        measurand.coverage_probability, nu, run.get("dof_rounding", "floor"))
    uc = math.sqrt(max(var, 0.0))
    return Recomputed(label, uc, nu, k, k * uc)


def _rel(a: float, b: float) -> bool:
    if math.isinf(a) or math.isinf(b):
        return a == b
    return math.isclose(a, b, rel_tol=_REL_TOL, abs_tol=1e-300)


# --------------------------------------------------------------------------- overview
@dataclass(frozen=True)
class TermRow:
    """One budget row with its source in a few words."""

    term: Term
    origin: str
    source: str

    def to_dict(self) -> dict[str, Any]:
        return {**self.term.to_dict(), "origin": self.origin, "source": self.source}


@dataclass(frozen=True)
class MeasurandOverview:
    measurand: Measurand
    rows: tuple[TermRow, ...]          # sorted by share of u_c², largest first

    def to_dict(self) -> dict[str, Any]:
        m = self.measurand
        return {"name": m.name, "unit": m.unit, "expression": m.expression, "value": m.value,
                "standard_uncertainty": m.standard_uncertainty,
                "effective_dof": dof_out(m.effective_dof), "coverage_factor": m.coverage_factor,
                "coverage_probability": m.coverage_probability,
                "expanded_uncertainty": m.expanded_uncertainty,
                "terms": [r.to_dict() for r in self.rows]}


@dataclass(frozen=True)
class Overview:
    title: str
    measurands: tuple[MeasurandOverview, ...]

    def to_dict(self) -> dict[str, Any]:
        return {"title": self.title, "measurands": [m.to_dict() for m in self.measurands]}


def chosen_measurands(budget: Budget, measurand: str | None) -> tuple[Measurand, ...]:
    """Every measurand, or the one named (UsageError with a did-you-mean otherwise)."""
    return _chosen(budget, measurand)


def _chosen(budget: Budget, measurand: str | None) -> tuple[Measurand, ...]:
    if measurand is None:
        return budget.measurands
    names = [m.name for m in budget.measurands]
    if measurand not in names:
        raise UsageError(f"no measurand '{measurand}'{did_you_mean(measurand, names)} "
                         f"(measurands: {', '.join(names)})", field="--measurand")
    return (budget.measurand(measurand),)


def _source_words(budget: Budget, name: str) -> tuple[str, str]:
    try:
        q = budget.input(name)
    except KeyError:
        return "", ""
    prov = q.provenance
    if prov.files:
        return prov.origin, ", ".join(Path(f.path).name for f in prov.files)
    # the method's first clause: "typed in (certificate …)", "arithmetic mean of 5 …"
    return prov.origin, prov.method.split(";")[0]


def overview(budget: Budget, measurand: str | None = None) -> Overview:
    """Every term of every measurand (or of one), sorted by its share of u_c², largest first."""
    out = []
    for m in _chosen(budget, measurand):
        rows = tuple(TermRow(t, *_source_words(budget, t.name))
                     for t in sorted(m.terms, key=lambda t: -t.variance_share))
        out.append(MeasurandOverview(m, rows))
    return Overview(budget.title, tuple(out))


# --------------------------------------------------------------------------- one term
@dataclass(frozen=True)
class TermAnswer:
    """The fixed-section answer for one term of one measurand (units: the term's own for
    estimate and u; the measurand's for contribution and the what-if lines)."""

    measurand: str
    measurand_unit: str
    term: Term
    description: str
    distribution: dict[str, Any]
    distribution_reason: str
    dof_reason: str
    derivative: str                    # ∂f/∂x over input quantities and constants
    derivative_value: float | None     # the written-out derivative evaluated at the estimates
    model: tuple[tuple[str, str], ...]  # (output, expression) the measurand depends on
    module_input: str                  # spec input whose module produced the term ("" if none)
    module_kind: str
    module_expression: str
    signed_contribution: float         # c·u
    origin: str
    method: str
    files: tuple[FileRef, ...]
    diagnostics: dict[str, Any]
    correlations: tuple[tuple[str, float], ...]
    notes: tuple[str, ...]
    what_if: tuple[Recomputed, ...]    # as evaluated, u halved, term removed
    cautions: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        return {"measurand": self.measurand, "measurand_unit": self.measurand_unit,
                "term": self.term.to_dict(), "description": self.description,
                "distribution": self.distribution,
                "distribution_reason": self.distribution_reason, "dof_reason": self.dof_reason,
                "derivative": self.derivative, "derivative_value": self.derivative_value,
                "model": [list(p) for p in self.model], "module_input": self.module_input,
                "module_kind": self.module_kind, "module_expression": self.module_expression,
                "signed_contribution": self.signed_contribution, "origin": self.origin,
                "method": self.method, "files": [f.to_dict() for f in self.files],
                "diagnostics": self.diagnostics,
                "correlations": [[n, r] for n, r in self.correlations],
                "notes": list(self.notes), "what_if": [w.to_dict() for w in self.what_if],
                "cautions": list(self.cautions)}


@dataclass(frozen=True)
class Explanation:
    title: str
    asked: str
    answers: tuple[TermAnswer, ...]

    def to_dict(self) -> dict[str, Any]:
        return {"title": self.title, "term": self.asked,
                "answers": [a.to_dict() for a in self.answers]}


def _owner(run: Mapping[str, Any], name: str) -> tuple[str, dict[str, Any]]:
    for spec_name, mod in run.get("modules", {}).items():
        if isinstance(mod, dict) and name in mod.get("quantities", []):
            return spec_name, mod
    return "", {}


def _light_diagnostics(diag: Any) -> dict[str, Any]:
    """The module's diagnostics with each figure reduced to its id and title."""
    if not isinstance(diag, dict):
        return {}
    out = dict(diag)
    if isinstance(out.get("figures"), list):
        out["figures"] = [{"id": f.get("id", ""), "title": f.get("title", "")}
                          for f in out["figures"] if isinstance(f, dict)]
    return out


def _model_chain(run: Mapping[str, Any], m: Measurand) -> tuple[tuple[str, str], ...]:
    """The measurand's expression and every earlier output it refers to (inlined there)."""
    model = {k: v for k, v in run.get("model", {}).items() if isinstance(v, str)}
    model.setdefault(m.name, m.expression)
    seen: list[str] = []

    def visit(name: str) -> None:
        if name in seen or name not in model:
            return
        seen.append(name)
        try:
            refs = ex.names(ex.parse(model[name]))
        except BudgetError:
            return
        for ref in sorted(refs):
            if ref != name:
                visit(ref)

    visit(m.name)
    return tuple((n, model[n]) for n in seen)


def _evaluate_text(text: str, env: Mapping[str, float]) -> float | None:
    if not text:
        return None
    try:
        tree = ex.parse(text)
        if ex.names(tree) - set(env):
            return None
        with np.errstate(all="ignore"):
            v = float(ex.compile_node(tree)(env))
    except (BudgetError, ValueError, TypeError, ZeroDivisionError, OverflowError):
        return None
    return v if math.isfinite(v) else None


def _derivative_on_demand(run: Mapping[str, Any], m: Measurand, t: Term,
                          env: Mapping[str, float]) -> str:
    """∂f/∂x written out from the record's model when the record left it out (a large model,
    see budget/engine.py); "" unless it reproduces the recorded sensitivity at the estimates."""
    chain = dict(_model_chain(run, m))
    if not chain:
        return ""
    try:
        trees = {k: ex.parse(v) for k, v in chain.items()}
        tree = trees[m.name]
        for _ in range(len(trees)):                  # inline earlier outputs, as the engine does
            refs = ex.names(tree) & (set(trees) - {m.name})
            if not refs:
                break
            tree = ex.substitute(tree, {r: trees[r] for r in refs})
        text = ex.to_text(ex.diff(tree, t.name))
    except (BudgetError, RecursionError):
        return ""
    value = _evaluate_text(text, env)
    return text if value is not None and _rel(value, t.sensitivity) else ""


def _answer(budget: Budget, m: Measurand, t: Term) -> TermAnswer:
    run = budget.run
    try:
        q = budget.input(t.name)
    except KeyError:
        q = None
    cautions = []
    env = {**{k: float(v) for k, v in run.get("constants", {}).items() if finite_number(v)},
           **{x.name: x.value for x in budget.inputs}}
    derivative = t.derivative or _derivative_on_demand(run, m, t, env)
    dvalue = _evaluate_text(derivative, env)
    if not derivative:
        cautions.append("the written-out derivative is not in the record (too long); the "
                        "sensitivity coefficient is the engine's exact derivative")
    elif dvalue is None:
        cautions.append("the written-out derivative could not be evaluated from the record")
    elif not _rel(dvalue, t.sensitivity):
        cautions.append(f"the written-out derivative gives {dvalue!r} at the estimates but the "
                        f"record states c = {t.sensitivity!r}: the record is inconsistent")
    base = combine_terms(budget, m)
    if not (_rel(base.standard_uncertainty, m.standard_uncertainty)
            and _rel(base.effective_dof, m.effective_dof)
            and _rel(base.coverage_factor, m.coverage_factor)):
        cautions.append(f"recomputed from its terms the record gives u_c = "
                        f"{base.standard_uncertainty:.6g}, ν_eff = {base.effective_dof:.6g}, "
                        f"k = {base.coverage_factor:.6g}, but states {m.standard_uncertainty:.6g},"
                        f" {m.effective_dof:.6g}, {m.coverage_factor:.6g}")
    if m.second_order_variance:
        cautions.append("the what-if lines keep the second-order variance as evaluated (it "
                        "cannot be rescaled from the record)")
    now = Recomputed("as evaluated", m.standard_uncertainty, m.effective_dof,
                     m.coverage_factor, m.expanded_uncertainty, 0.0)
    what_if = [now]
    for label, f in ((f"u({t.name}) halved", 0.5), (f"{t.name} removed", 0.0)):
        w = combine_terms(budget, m, {t.name: f}, label)
        ch = ((w.expanded_uncertainty - m.expanded_uncertainty) / m.expanded_uncertainty
              if m.expanded_uncertainty > 0 else None)
        what_if.append(Recomputed(label, w.standard_uncertainty, w.effective_dof,
                                  w.coverage_factor, w.expanded_uncertainty, ch))
    owner, mod = _owner(run, t.name)
    expr = mod.get("expression") or ""
    corr = tuple((b if a == t.name else a, float(r))
                 for a, b, r in run.get("input_correlations", []) if t.name in (a, b))
    prov = q.provenance if q is not None else None
    return TermAnswer(
        measurand=m.name, measurand_unit=m.unit, term=t,
        description=q.description if q is not None else "",
        distribution=q.distribution.to_dict() if q is not None else {"kind": t.distribution},
        distribution_reason=prov.distribution_reason if prov else "",
        dof_reason=prov.dof_reason if prov else "", derivative=derivative,
        derivative_value=dvalue, model=_model_chain(run, m), module_input=owner,
        module_kind=str(mod.get("module", "")), module_expression=expr,
        signed_contribution=t.sensitivity * t.standard_uncertainty,
        origin=prov.origin if prov else "", method=prov.method if prov else "",
        files=prov.files if prov else (), diagnostics=_light_diagnostics(mod.get("diagnostics")),
        correlations=corr, notes=prov.notes if prov else (), what_if=tuple(what_if),
        cautions=tuple(cautions))


def explain_term(budget: Budget, term: str, measurand: str | None = None) -> Explanation:
    """The fixed-section answer for ``term`` in every measurand that has it (or in one).

    ``term`` may also name a spec input whose module returned several quantities; each of its
    budget rows is then answered.

    Raises
    ------
    UsageError
        No such term (with a did-you-mean), or a term without a budget row.
    """
    ms = _chosen(budget, measurand)
    wanted = [term]
    owner = budget.run.get("modules", {}).get(term)
    if isinstance(owner, dict) and not any(t.name == term for m in ms for t in m.terms):
        wanted = [n for n in owner.get("quantities", []) if isinstance(n, str)]
    answers = tuple(_answer(budget, m, t) for w in wanted for m in ms for t in m.terms
                    if t.name == w)
    if answers:
        return Explanation(budget.title, term, answers)
    elsewhere = [m.name for m in budget.measurands if any(t.name == term for t in m.terms)]
    if elsewhere:
        raise UsageError(f"'{term}' is not a term of '{ms[0].name}' (it is a term of "
                         f"{', '.join(elsewhere)})", field="TERM")
    inputs = {q.name: q for q in budget.inputs}
    if term in inputs:
        why = ("it is a constant (u = 0)" if inputs[term].is_constant
               else "no output uses it")
        raise UsageError(f"'{term}' has no row in the budget: {why}", field="TERM")
    choices = {t.name for m in budget.measurands for t in m.terms} | set(
        budget.run.get("modules", {}))
    raise UsageError(f"no term '{term}' in the budget{did_you_mean(term, choices)}",
                     field="TERM")
