"""The budget result: one frozen object that the report, the JSON record, ``explain`` and
``compare`` all read.

The JSON record (:meth:`Budget.to_dict`) has the top-level keys ``schema``, ``measurands``,
``correlation``, ``monte_carlo``, ``inputs`` and ``warnings`` (the stable contract) plus ``run`` (spec digest,
seed, settings, module diagnostics). Numbers are plain floats at full precision; an infinite
number of degrees of freedom is written as ``null``. Nothing time-dependent is stored, so the
same spec, inputs and seed give a byte-identical record.
"""

from __future__ import annotations

import html
import json
import math
from dataclasses import dataclass, field
from typing import Any

from .quantity import Quantity
from .warnings import Warning, warnings_from_list

__all__ = ["SCHEMA", "Term", "Measurand", "MonteCarlo", "Budget", "dof_out", "dof_in"]

SCHEMA = "qcs-budget/record-1"


def dof_out(nu: float) -> float | None:
    """Degrees of freedom for JSON: ``None`` stands for infinity."""
    return None if nu is None or math.isinf(nu) else float(nu)


def dof_in(nu: float | None) -> float:
    """Degrees of freedom read from JSON: ``None`` stands for infinity (inverse of dof_out)."""
    return math.inf if nu is None else float(nu)


@dataclass(frozen=True)
class Term:
    """One row of a measurand's budget: an input's part in u_c(y)."""

    name: str
    value: float
    standard_uncertainty: float
    unit: str
    distribution: str
    dof: float
    sensitivity: float
    contribution: float        # |c·u|, in the measurand's unit
    variance_share: float      # share of u_c² (sums to 1 over the terms)
    evaluation: str = "B"
    derivative: str = ""       # ∂f/∂x written out

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "value": self.value,
                "standard_uncertainty": self.standard_uncertainty, "unit": self.unit,
                "distribution": self.distribution, "dof": dof_out(self.dof),
                "sensitivity": self.sensitivity, "contribution": self.contribution,
                "variance_share": self.variance_share, "evaluation": self.evaluation,
                "derivative": self.derivative}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Term:
        return cls(name=d["name"], value=d["value"], standard_uncertainty=d["standard_uncertainty"],
                   unit=d.get("unit", ""), distribution=d.get("distribution", "normal"),
                   dof=dof_in(d.get("dof")), sensitivity=d["sensitivity"],
                   contribution=d["contribution"], variance_share=d["variance_share"],
                   evaluation=d.get("evaluation", "B"), derivative=d.get("derivative", ""))


@dataclass(frozen=True)
class Measurand:
    """The GUM result for one output of the model."""

    name: str
    unit: str
    value: float
    standard_uncertainty: float
    effective_dof: float
    coverage_factor: float
    coverage_probability: float
    expanded_uncertainty: float
    terms: tuple[Term, ...]
    expression: str = ""
    second_order_variance: float = 0.0
    #: P(|t_ν_eff| ≤ k), the coverage probability k gives at ν_eff (JCGM 100 G.3); it states
    #: what a fixed k means (k = 2 at ν_eff = 3: 0.86). None in records written before it.
    coverage_probability_of_k: float | None = None

    def term(self, name: str) -> Term:
        for t in self.terms:
            if t.name == name:
                return t
        raise KeyError(name)

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "unit": self.unit, "value": self.value,
                "standard_uncertainty": self.standard_uncertainty,
                "effective_dof": dof_out(self.effective_dof),
                "coverage_factor": self.coverage_factor,
                "coverage_probability": self.coverage_probability,
                "expanded_uncertainty": self.expanded_uncertainty,
                "terms": [t.to_dict() for t in self.terms], "expression": self.expression,
                "second_order_variance": self.second_order_variance,
                "coverage_probability_of_k": self.coverage_probability_of_k}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Measurand:
        return cls(name=d["name"], unit=d.get("unit", ""), value=d["value"],
                   standard_uncertainty=d["standard_uncertainty"],
                   effective_dof=dof_in(d.get("effective_dof")),
                   coverage_factor=d["coverage_factor"],
                   coverage_probability=d["coverage_probability"],
                   expanded_uncertainty=d["expanded_uncertainty"],
                   terms=tuple(Term.from_dict(t) for t in d.get("terms", [])),
                   expression=d.get("expression", ""),
                   second_order_variance=d.get("second_order_variance", 0.0),
                   coverage_probability_of_k=d.get("coverage_probability_of_k"))


@dataclass(frozen=True)
class MonteCarlo:
    """The JCGM 101 result for one output and its §8 comparison with the linear result."""

    measurand: str
    trials: int
    value: float
    standard_uncertainty: float
    interval_low: float
    interval_high: float
    interval_kind: str
    validated: bool
    tolerance: float
    d_low: float
    d_high: float
    symmetric_interval: tuple[float, float]
    shortest_interval: tuple[float, float]
    histogram_counts: tuple[int, ...] = ()
    histogram_edges: tuple[float, ...] = ()
    adaptive: bool = False
    stabilised: bool = True
    #: fraction of the trials inside the linear interval y ± U (None in older records)
    linear_interval_probability: float | None = None

    def to_dict(self) -> dict[str, Any]:
        return {"measurand": self.measurand, "trials": self.trials, "value": self.value,
                "standard_uncertainty": self.standard_uncertainty,
                "interval_low": self.interval_low, "interval_high": self.interval_high,
                "interval_kind": self.interval_kind, "validated": self.validated,
                "tolerance": self.tolerance, "d_low": self.d_low, "d_high": self.d_high,
                "symmetric_interval": list(self.symmetric_interval),
                "shortest_interval": list(self.shortest_interval),
                "histogram": {"counts": list(self.histogram_counts),
                              "edges": list(self.histogram_edges)},
                "adaptive": self.adaptive, "stabilised": self.stabilised,
                "linear_interval_probability": self.linear_interval_probability}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> MonteCarlo:
        hist = d.get("histogram", {})
        return cls(measurand=d["measurand"], trials=d["trials"], value=d["value"],
                   standard_uncertainty=d["standard_uncertainty"],
                   interval_low=d["interval_low"], interval_high=d["interval_high"],
                   interval_kind=d["interval_kind"], validated=d["validated"],
                   tolerance=d["tolerance"], d_low=d["d_low"], d_high=d["d_high"],
                   symmetric_interval=tuple(d.get("symmetric_interval", (math.nan,) * 2)),
                   shortest_interval=tuple(d.get("shortest_interval", (math.nan,) * 2)),
                   histogram_counts=tuple(hist.get("counts", ())),
                   histogram_edges=tuple(hist.get("edges", ())),
                   adaptive=d.get("adaptive", False), stabilised=d.get("stabilised", True),
                   linear_interval_probability=d.get("linear_interval_probability"))


@dataclass(frozen=True)
class Budget:
    """Everything one evaluation of a spec produced.

    Attributes
    ----------
    title : str
    measurands : tuple of Measurand
    correlation_names : tuple of str
        Measurand names, the order of ``correlation_matrix``.
    correlation_matrix : tuple of tuples
        Correlation between the measurands (first-order propagation).
    monte_carlo : tuple of MonteCarlo
        Empty when Monte Carlo was switched off.
    inputs : tuple of Quantity
    run : dict
        Spec file and digest, seed, settings, report header fields, input correlations,
        each input module's diagnostics, notes.
    warnings : tuple of budget.warnings.Warning
        Everything that can change what a number means (see :mod:`budget.warnings`); the
        record's top-level ``warnings`` list.
    """

    title: str
    measurands: tuple[Measurand, ...]
    correlation_names: tuple[str, ...]
    correlation_matrix: tuple[tuple[float, ...], ...]
    monte_carlo: tuple[MonteCarlo, ...]
    inputs: tuple[Quantity, ...]
    run: dict[str, Any] = field(default_factory=dict)
    schema: str = SCHEMA
    warnings: tuple[Warning, ...] = ()

    # ------------------------------------------------------------------ access
    def measurand(self, name: str) -> Measurand:
        for m in self.measurands:
            if m.name == name:
                return m
        raise KeyError(name)

    def mc(self, name: str) -> MonteCarlo | None:
        for m in self.monte_carlo:
            if m.measurand == name:
                return m
        return None

    def input(self, name: str) -> Quantity:
        for q in self.inputs:
            if q.name == name:
                return q
        raise KeyError(name)

    # ------------------------------------------------------------------ records
    def to_dict(self) -> dict[str, Any]:
        """The JSON record (see module docstring)."""
        return {
            "schema": self.schema,
            "measurands": [m.to_dict() for m in self.measurands],
            "correlation": {"measurands": list(self.correlation_names),
                            "matrix": [list(r) for r in self.correlation_matrix]},
            "monte_carlo": [m.to_dict() for m in self.monte_carlo],
            "inputs": [q.to_dict() for q in self.inputs],
            "warnings": [w.to_dict() for w in self.warnings],
            "run": {"title": self.title, **self.run},
        }

    def to_json(self) -> str:
        """The record as JSON text (sorted nowhere: key order is part of the format)."""
        return json.dumps(self.to_dict(), indent=2, ensure_ascii=False, allow_nan=False) + "\n"

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Budget:
        run = dict(d.get("run", {}))
        title = run.pop("title", "")
        corr = d.get("correlation", {})
        return cls(title=title,
                   measurands=tuple(Measurand.from_dict(m) for m in d["measurands"]),
                   correlation_names=tuple(corr.get("measurands", ())),
                   correlation_matrix=tuple(tuple(r) for r in corr.get("matrix", ())),
                   monte_carlo=tuple(MonteCarlo.from_dict(m) for m in d.get("monte_carlo", [])),
                   inputs=tuple(Quantity.from_dict(q) for q in d.get("inputs", [])),
                   run=run, schema=d.get("schema", SCHEMA),
                   warnings=warnings_from_list(d.get("warnings")))

    def to_frame(self):
        """All budget rows as a pandas DataFrame (one row per measurand and term)."""
        import pandas as pd  # only notebooks need pandas here
        rows = []
        for m in self.measurands:
            for t in m.terms:
                rows.append({"measurand": m.name, **t.to_dict()})
        return pd.DataFrame(rows)

    def _repr_html_(self) -> str:
        esc = html.escape
        out = [f"<h4>{esc(self.title)}</h4>"]
        for m in self.measurands:
            out.append(f"<p><b>{esc(m.name)}</b> = {m.value:.10g} {esc(m.unit)}, "
                       f"u = {m.standard_uncertainty:.3g}, U = {m.expanded_uncertainty:.3g} "
                       f"(k = {m.coverage_factor:.3g}, p = {m.coverage_probability:g})</p>")
            out.append("<table><tr><th>X<sub>i</sub></th><th>x<sub>i</sub></th>"
                       "<th>u(x<sub>i</sub>)</th><th>probability distribution</th>"
                       "<th>ν<sub>i</sub></th><th>c<sub>i</sub></th>"
                       "<th>u<sub>i</sub>(y)</th><th>u<sub>i</sub>²/u<sub>c</sub>²</th></tr>")
            for t in m.terms:
                nu = "∞" if math.isinf(t.dof) else f"{t.dof:.3g}"
                out.append(f"<tr><td>{esc(t.name)}</td><td>{t.value:.8g}</td>"
                           f"<td>{t.standard_uncertainty:.3g}</td><td>{esc(t.distribution)}</td>"
                           f"<td>{nu}</td><td>{t.sensitivity:.4g}</td>"
                           f"<td>{math.copysign(t.contribution, t.sensitivity):.3g}</td><td>{100 * t.variance_share:.1f} %</td>"
                           "</tr>")
            out.append("</table>")
        return "\n".join(out)
