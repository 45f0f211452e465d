"""Quantities with provenance: what every input module returns and every budget row shows.

Invariants
----------
* ``standard_uncertainty >= 0``; zero means the quantity is a constant.
* ``dof`` is a positive float; ``math.inf`` when the uncertainty is taken as exactly known
  (the usual reading of a Type B term with no stated reliability).
* ``evaluation`` is ``"A"`` (statistical analysis of series of observations) or ``"B"``
  (any other means), as in JCGM 100 §4.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from typing import Any

from .distributions import Distribution
from .errors import BudgetError
from .warnings import Warning

__all__ = ["FileRef", "Provenance", "Quantity", "ModuleResult"]


@dataclass(frozen=True)
class FileRef:
    """A data file that a quantity was computed from.

    Parameters
    ----------
    path : str
        Path as written in the spec (relative to the spec's folder).
    sha256 : str
        Hex digest of the file's bytes.
    rows : str
        The data rows used, e.g. ``"1-36000"`` or ``"2, 4-9"`` (1-based, header excluded).
    """

    path: str
    sha256: str
    rows: str = ""

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


@dataclass(frozen=True)
class Provenance:
    """Where a quantity came from and why it has the distribution and ν it has.

    Parameters
    ----------
    origin : str
        ``"spec"`` (typed in), ``"observations"`` (repeated readings in the spec), ``"constant"``,
        or ``"module:NAME"`` for an input module.
    method : str
        One or two sentences: how the estimate and its uncertainty were obtained.
    distribution_reason : str
        Why this distribution was assigned.
    dof_reason : str
        Why these degrees of freedom.
    files : tuple of FileRef
        Data files read (empty for typed-in values).
    notes : tuple of str
        Free-text remarks that do not change what the number means.
    across_runs : str
        Whether the error is the same in other runs that use the same source: ``"shared"``
        (systematic: a calibration, a certificate, a model), ``"independent"`` (noise during the
        run, resolution, Type A), or ``""`` (not stated; ``compare`` then applies its defaults).
    shared_as : str
        A declared common cause (``shared_as = "label"`` of a typed-in input): two records share
        the term when their labels match. Default ``""`` (not declared).
    warnings : tuple of budget.warnings.Warning
        Findings that can change what the number means (extrapolation, inflated scatter, a
        default chosen for the user ...). The engine collects them into ``Budget.warnings``
        (the record's top-level ``warnings``); they are not repeated in ``source``.
    """

    origin: str = "spec"
    method: str = ""
    distribution_reason: str = ""
    dof_reason: str = ""
    files: tuple[FileRef, ...] = ()
    notes: tuple[str, ...] = ()
    across_runs: str = ""
    shared_as: str = ""
    warnings: tuple[Warning, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return {
            "origin": self.origin,
            "method": self.method,
            "distribution_reason": self.distribution_reason,
            "dof_reason": self.dof_reason,
            "files": [f.to_dict() for f in self.files],
            "notes": list(self.notes),
            "across_runs": self.across_runs,
            "shared_as": self.shared_as,
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Provenance:
        return cls(origin=d.get("origin", "spec"), method=d.get("method", ""),
                   distribution_reason=d.get("distribution_reason", ""),
                   dof_reason=d.get("dof_reason", ""),
                   files=tuple(FileRef(**f) for f in d.get("files", [])),
                   notes=tuple(d.get("notes", [])),
                   across_runs=d.get("across_runs", ""), shared_as=d.get("shared_as", ""))


@dataclass(frozen=True)
class Quantity:
    """An input quantity of the measurement model: estimate, uncertainty and its story.

    Parameters
    ----------
    name : str
        Identifier used in the model expression.
    value : float
        Estimate x (in ``unit``); for a bounded distribution its expectation.
    standard_uncertainty : float
        u(x) in ``unit``, k = 1.
    distribution : Distribution
        Probability distribution assigned to the quantity (used by the Monte Carlo method).
    unit : str
        Unit symbol, ``"1"`` for dimensionless. Default ``"1"``.
    dof : float
        Degrees of freedom ν of u(x); ``math.inf`` when exactly known. Default ``inf``.
    evaluation : str
        ``"A"`` or ``"B"``. Default ``"B"``.
    description : str
        What the quantity is, in words, for the report and ``explain``.
    provenance : Provenance
        Source, method and reasons.
    """

    name: str
    value: float
    standard_uncertainty: float
    distribution: Distribution
    unit: str = "1"
    dof: float = math.inf
    evaluation: str = "B"
    description: str = ""
    provenance: Provenance = field(default_factory=Provenance)

    def __post_init__(self) -> None:
        if not math.isfinite(self.value):
            raise BudgetError("value must be a finite number; got " + repr(self.value), field=self.name)
        u = self.standard_uncertainty
        if not (math.isfinite(u) and u >= 0):
            raise BudgetError(f"standard uncertainty must be finite and >= 0; got {u!r}",
                              field=self.name)
        if not (self.dof > 0):
            raise BudgetError(f"degrees of freedom must be > 0; got {self.dof!r}", field=self.name)
        if self.evaluation not in ("A", "B"):
            raise BudgetError(f"evaluation must be 'A' or 'B'; got {self.evaluation!r}",
                              field=self.name)

    @property
    def is_constant(self) -> bool:
        """True when u(x) = 0: the quantity takes part in the model but not in the budget."""
        return self.standard_uncertainty == 0.0

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form (the record's ``inputs`` entries)."""
        return {
            "name": self.name,
            "value": float(self.value),
            "standard_uncertainty": float(self.standard_uncertainty),
            "unit": self.unit,
            "distribution": self.distribution.to_dict(),
            "dof": None if math.isinf(self.dof) else float(self.dof),
            "evaluation": self.evaluation,
            "source": {"description": self.description, **self.provenance.to_dict()},
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Quantity:
        src = dict(d.get("source", {}))
        description = src.pop("description", "")
        return cls(name=d["name"], value=d["value"], standard_uncertainty=d["standard_uncertainty"],
                   distribution=Distribution.from_dict(d["distribution"]), unit=d.get("unit", "1"),
                   dof=math.inf if d.get("dof") is None else d["dof"],
                   evaluation=d.get("evaluation", "B"), description=description,
                   provenance=Provenance.from_dict(src))


@dataclass(frozen=True)
class ModuleResult:
    """What an input module returns for one ``[inputs.NAME]`` table.

    Parameters
    ----------
    quantities : tuple of Quantity
        One or more quantities. With a single quantity and ``expression=None`` the quantity is
        the input ``NAME`` itself (its ``name`` must equal NAME).
    expression : str or None
        When several quantities are returned, the model expression (over their names) that
        combines them into NAME, e.g. ``"R_cal * (1 + R_temp) * (1 + R_volt)"``. The engine
        inlines it into the model, so each sub-quantity becomes its own budget row.
    correlations : tuple of (str, str, float)
        Correlation coefficients between the returned quantities.
    diagnostics : dict
        JSON-ready findings of the module (fit statistics, verdicts, flags). A key ``figures``
        holds a list of figure descriptions (see :mod:`budget.report.figures`).
    warnings : tuple of budget.warnings.Warning
        Findings of the module that can change what its numbers mean; ``input`` may be left
        empty (the engine fills in NAME). Warnings in the quantities' provenance count too.
    """

    quantities: tuple[Quantity, ...]
    expression: str | None = None
    correlations: tuple[tuple[str, str, float], ...] = ()
    #: unit of the value ``expression`` gives, when its numbers carry one (frequency: a
    #: nominal in Hz times relative factors); None: inferred from the quantities' units
    unit: str | None = None
    diagnostics: dict[str, Any] = field(default_factory=dict)
    warnings: tuple[Warning, ...] = ()
