"""The budget result: one frozen object that the report, the JSON record, ``explain`` and
``compare`` all read.

The JSON record (:meth:`Budget.to_dict`) has the top-level keys ``schema``, ``measurands``,
``correlation``, ``monte_carlo``, ``inputs`` and ``warnings`` (the stable contract) plus ``run`` (spec digest,
seed, settings, module diagnostics). Numbers are plain floats at full precision; an infinite
number of degrees of freedom is written as ``null``. A measurand's numbers (and its Monte Carlo
result's) are in coherent SI; when it is shown in another unit (``[units] I = "pA"``) the entry
also has ``display_unit``, and reading the record shows the numbers in that unit again. Records
written before display units were stored this way (no ``display_unit``) hold the numbers in the
unit their ``unit`` names and are read as they are. Nothing time-dependent is stored, so the
same spec, inputs and seed give a byte-identical record.
"""

from __future__ import annotations

import copy
import html
import json
import math
from dataclasses import dataclass, field, replace
from typing import Any

from .quantity import Quantity
from .warnings import Warning, warnings_from_list

__all__ = ["SCHEMA", "OLDER_SCHEMAS", "Term", "Measurand", "MonteCarlo", "Budget", "dof_out", "dof_in",
           "display_scale", "in_unit"]

#: The record format this version writes. Raise it whenever the same spec, inputs and seed
#: would give other bytes than before (a field added, renamed or computed differently), since
#: ``verify --inputs`` compares a recomputed record with the signed one byte for byte.
#: record-2: Monte Carlo ``numerical_accuracy`` (s/√h of y, u and the interval ends),
#: ``verdict`` (three-valued §8 comparison), ``procedure``, ``stabilised``,
#: ``stop_tolerance``, ``run.sampling``; the chains' deviation computed as q − 1 (working unit
#: 1, ``run.model`` without the factor 10⁶) and scaled only for display, and named
#: ``delta_I`` (formerly ``dev_ppm``/``dev_1e8``/``dev_1e9``) at every display scale.
SCHEMA = "qcs-budget/record-2"
#: Older formats still read (by compare, explain, report, the logbook, verify): their fields
#: are a subset of the current ones with the same meaning and the same SI numbers. Their bytes
#: cannot be reproduced by this version, so ``verify --inputs`` does not compare them.
OLDER_SCHEMAS = ("qcs-budget/record-1",)


def dof_out(nu: float) -> float | None:
    """Degrees of freedom for JSON: ``None`` stands for infinity."""
    return None if nu is None or math.isinf(nu) else float(nu)


def dof_in(nu: float | None) -> float:
    """Degrees of freedom read from JSON: ``None`` stands for infinity (inverse of dof_out)."""
    return math.inf if nu is None else float(nu)


def display_scale(unit: str) -> tuple[float, str] | None:
    """(factor to coherent SI, SI symbol) of a display unit that is not coherent SI (``"pA"``
    gives (1e-12, "A")); None for a coherent SI unit or a label that is no unit."""
    from .units import UnitError, parse_unit
    try:
        u = parse_unit(unit)
    except UnitError:
        return None
    if u.scale == 1.0 or u.is_offset:
        return None
    return u.scale, u.si


def _json_copy(v: Any) -> Any:
    """A copy of parsed JSON data (dicts and lists copied, their strings, numbers, booleans
    and None shared: they cannot change); anything else is deep-copied. Three times faster
    than ``copy.deepcopy`` on a record's measurand."""
    t = type(v)
    if t is dict:
        return {k: _json_copy(x) for k, x in v.items()}
    if t is list:
        return [_json_copy(x) for x in v]
    if t in (str, float, int, bool) or v is None:
        return v
    return copy.deepcopy(v)


def _display_from_record(d: dict[str, Any], what: str) -> float:
    """The factor of a record entry's ``display_unit``, checked against its SI ``unit``."""
    from .errors import DataError
    shown = d.get("display_unit")
    got = display_scale(shown) if isinstance(shown, str) else None
    if got is None or got[1] != (d.get("unit", got[1]) or "1"):
        raise DataError(f"display_unit {shown!r} of {what} {d.get('name', d.get('measurand'))!r}"
                        f" is not a non-SI unit of its unit {d.get('unit')!r}",
                        field="display_unit")
    return got[0]


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
    #: the record entry this measurand was read from when it states a display unit (SI numbers
    #: written back verbatim, so a record read and written again is byte-identical)
    si_form: tuple | None = field(default=None, compare=False, repr=False)

    def _key(self) -> tuple:
        return (self.unit, self.value, self.standard_uncertainty, self.expanded_uncertainty,
                self.second_order_variance,
                tuple((t.name, t.sensitivity, t.contribution) for t in self.terms))

    def term(self, name: str) -> Term:
        for t in self.terms:
            if t.name == name:
                return t
        raise KeyError(name)

    def to_dict(self) -> dict[str, Any]:
        """The record entry: numbers in coherent SI; a non-SI display unit (``[units] I =
        "pA"``) is kept as ``display_unit`` beside the SI ``unit``."""
        if self.si_form is not None and self.si_form[0] == self._key():
            return copy.deepcopy(self.si_form[1])
        conv = display_scale(self.unit)
        f, unit = conv if conv is not None else (1.0, self.unit)
        out = {"name": self.name, "unit": unit}
        if conv is not None:
            out["display_unit"] = self.unit
        terms = []
        for t in self.terms:
            td = t.to_dict()
            td["sensitivity"], td["contribution"] = t.sensitivity * f, t.contribution * f
            terms.append(td)
        out.update({"value": self.value * f,
                    "standard_uncertainty": self.standard_uncertainty * f,
                    "effective_dof": dof_out(self.effective_dof),
                    "coverage_factor": self.coverage_factor,
                    "coverage_probability": self.coverage_probability,
                    "expanded_uncertainty": self.expanded_uncertainty * f,
                    "terms": terms, "expression": self.expression,
                    "second_order_variance": self.second_order_variance * f * f,
                    "coverage_probability_of_k": self.coverage_probability_of_k})
        return out

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Measurand:
        """Read a record entry; with ``display_unit`` the numbers (SI) are shown in it."""
        f = _display_from_record(d, "measurand") if "display_unit" in d else 1.0
        terms = tuple(Term.from_dict(t) for t in d.get("terms", []))
        if f != 1.0:
            terms = tuple(replace(t, sensitivity=t.sensitivity / f,
                                  contribution=t.contribution / f) for t in terms)
        m = cls(name=d["name"], unit=d.get("display_unit", d.get("unit", "")),
                value=d["value"] / f, standard_uncertainty=d["standard_uncertainty"] / f,
                effective_dof=dof_in(d.get("effective_dof")),
                coverage_factor=d["coverage_factor"],
                coverage_probability=d["coverage_probability"],
                expanded_uncertainty=d["expanded_uncertainty"] / f,
                terms=terms, expression=d.get("expression", ""),
                second_order_variance=d.get("second_order_variance", 0.0) / (f * f),
                coverage_probability_of_k=d.get("coverage_probability_of_k"))
        if f == 1.0:
            return m
        return replace(m, si_form=(m._key(), _json_copy(d)))


def in_unit(m: Measurand, unit: str, *, file: str | None = None) -> Measurand:
    """``m`` shown in ``unit``: every number (value, u, U, c_i, contributions, second-order
    variance) scaled by one factor. ``unit`` must have m's dimension.

    Raises
    ------
    DataError
        Naming ``file``, when either unit is no unit, or the dimensions differ (a current
        against a voltage).
    """
    from .errors import DataError
    from .units import UnitError, dim_text, display_factor, parse_unit
    if unit == m.unit:
        return m
    try:
        have, want = parse_unit(m.unit or "1"), parse_unit(unit or "1")
    except UnitError as exc:
        raise DataError(f"'{m.name}' in {m.unit!r} cannot be shown in {unit!r}: {exc}",
                        file=file, field="unit") from None
    if have.dims != want.dims or have.is_offset or want.is_offset:
        raise DataError(f"'{m.name}' is {dim_text(have.dims)} here but {dim_text(want.dims)} "
                        "in the first record: results of different dimensions are not "
                        "comparable", file=file, field="unit")
    f = display_factor(have, want)
    return replace(m, unit=unit, value=m.value * f,
                   standard_uncertainty=m.standard_uncertainty * f,
                   expanded_uncertainty=m.expanded_uncertainty * f,
                   second_order_variance=m.second_order_variance * f * f,
                   terms=tuple(replace(t, sensitivity=t.sensitivity * f,
                                       contribution=t.contribution * f) for t in m.terms),
                   si_form=None)


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
    #: as for Measurand: the record entry read, when it states a display unit
    si_form: tuple | None = field(default=None, compare=False, repr=False)
    #: JCGM 101 §8 verdict: "validated", "not_validated" or "inconclusive"
    #: (budget.propagate.validate); older records: from ``validated``
    verdict: str = ""
    #: numerical standard uncertainties from the batches (budget.propagate.mcm.Accuracy):
    #: {"batches", "value", "standard_uncertainty", "symmetric_interval",
    #: "shortest_interval"}, in the measurand's unit; None in older records or with one batch
    accuracy: dict | None = None
    #: δ/5 the adaptive stop was tested against (0: a fixed number of trials or older records)
    stop_tolerance: float = 0.0

    def __post_init__(self) -> None:
        if not self.verdict:
            object.__setattr__(self, "verdict",
                               "validated" if self.validated else "not_validated")

    @property
    def numerical_uncertainty(self) -> tuple[float, float]:
        """(s_low, s_high): numerical standard uncertainties of the reported interval's ends
        (NaN when not known)."""
        if not self.accuracy:
            return (math.nan, math.nan)
        a, b = self.accuracy[f"{self.interval_kind}_interval"]
        return (float(a), float(b))

    def _key(self) -> tuple:
        acc = () if not self.accuracy else tuple(
            (k, tuple(v) if isinstance(v, (list, tuple)) else v)
            for k, v in sorted(self.accuracy.items()))
        return (self.value, self.standard_uncertainty, self.interval_low, self.interval_high,
                self.tolerance, self.d_low, self.d_high, self.symmetric_interval,
                self.shortest_interval, self.histogram_edges, acc, self.stop_tolerance)

    def to_dict(self, unit: str = "") -> dict[str, Any]:
        """The record entry, in coherent SI; ``unit`` is the measurand's display unit (a
        non-SI one is kept as ``unit`` and ``display_unit`` as for the measurand)."""
        if self.si_form is not None and self.si_form[0] == self._key():
            return copy.deepcopy(self.si_form[1])
        conv = display_scale(unit)
        f = 1.0 if conv is None else conv[0]
        out: dict[str, Any] = {"measurand": self.measurand}
        if conv is not None:
            out.update({"unit": conv[1], "display_unit": unit})
        out.update({
            "trials": self.trials, "value": self.value * f,
            "standard_uncertainty": self.standard_uncertainty * f,
            "interval_low": self.interval_low * f, "interval_high": self.interval_high * f,
            "interval_kind": self.interval_kind, "validated": self.validated,
            "tolerance": self.tolerance * f, "d_low": self.d_low * f, "d_high": self.d_high * f,
            "symmetric_interval": [x * f for x in self.symmetric_interval],
            "shortest_interval": [x * f for x in self.shortest_interval],
            "histogram": {"counts": list(self.histogram_counts),
                          "edges": [x * f for x in self.histogram_edges]},
            "adaptive": self.adaptive, "stabilised": self.stabilised,
            "linear_interval_probability": self.linear_interval_probability,
            "verdict": self.verdict,
            "procedure": "adaptive" if self.adaptive else "fixed"})
        if self.adaptive:
            out["stop_tolerance"] = self.stop_tolerance * f
        if self.accuracy:
            out["numerical_accuracy"] = {
                k: ([x * f for x in v] if isinstance(v, (list, tuple)) else
                    v if k == "batches" else v * f) for k, v in self.accuracy.items()}
        return out

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> MonteCarlo:
        hist = d.get("histogram", {})
        f = _display_from_record(d, "Monte Carlo result") if "display_unit" in d else 1.0
        mc = cls(measurand=d["measurand"], trials=d["trials"], value=d["value"] / f,
                 standard_uncertainty=d["standard_uncertainty"] / f,
                 interval_low=d["interval_low"] / f, interval_high=d["interval_high"] / f,
                 interval_kind=d["interval_kind"], validated=d["validated"],
                 tolerance=d["tolerance"] / f, d_low=d["d_low"] / f, d_high=d["d_high"] / f,
                 symmetric_interval=tuple(x / f for x in d.get("symmetric_interval",
                                                               (math.nan,) * 2)),
                 shortest_interval=tuple(x / f for x in d.get("shortest_interval",
                                                             (math.nan,) * 2)),
                 histogram_counts=tuple(hist.get("counts", ())),
                 histogram_edges=tuple(x / f for x in hist.get("edges", ())),
                 adaptive=d.get("adaptive", False), stabilised=d.get("stabilised", True),
                 linear_interval_probability=d.get("linear_interval_probability"),
                 verdict=d.get("verdict", ""),
                 accuracy=None if not d.get("numerical_accuracy") else {
                     k: (tuple(x / f for x in v) if isinstance(v, list) else
                         v if k == "batches" else v / f)
                     for k, v in d["numerical_accuracy"].items()},
                 stop_tolerance=d.get("stop_tolerance", 0.0) / f)
        if f == 1.0:
            return mc
        return replace(mc, si_form=(mc._key(), _json_copy(d)))


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

    def _unit_of(self, name: str) -> str:
        for m in self.measurands:
            if m.name == name:
                return m.unit
        return ""

    # ------------------------------------------------------------------ records
    def to_dict(self) -> dict[str, Any]:
        """The JSON record (see module docstring)."""
        return {
            "schema": self.schema,
            "measurands": [m.to_dict() for m in self.measurands],
            "correlation": {"measurands": list(self.correlation_names),
                            "matrix": [list(r) for r in self.correlation_matrix]},
            "monte_carlo": [m.to_dict(self._unit_of(m.measurand)) for m in self.monte_carlo],
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
