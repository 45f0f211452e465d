"""The rows of a measurand's uncertainty budget, grouped by where the inputs came from.

One layout for the terminal, the HTML report and the PDF, after the budget tables of the
EA-4/02 worked examples: quantity X_i, estimate x_i, standard uncertainty u(x_i) (with its
Type A/B evaluation and degrees of freedom ν_i), probability distribution, sensitivity
coefficient c_i and contribution u_i(y) = c_i·u(x_i), signed and in the unit of y. Each
row also carries its share u_i²(y)/u_c²(y) of the combined variance, which the renderers
draw as a bar with the number beside it.

Rows are grouped by origin: the quantities one input module returned (``[inputs.NAME]``
with ``module = ...``) form one group under a sub-heading naming NAME, the module and its
data file(s); inputs typed into the spec form one group. Groups come in the order of their
summed share (largest first), rows within a group likewise.

No rounding happens here; renderers round with :mod:`budget.fmt`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # pragma: no cover - annotations only
    from .quantity import Quantity
    from .result import Budget, Measurand, Term

__all__ = ["BudgetRow", "RowGroup", "grouped_rows", "distribution_name", "text_bar",
           "column_headings", "sensitivity_unit"]

#: display names of the distributions (JCGM 100 §4.3, JCGM 101 §6.4); others as stored
_DISTRIBUTION_NAMES = {"student-t": "t", "arcsine": "arcsine (U-shaped)"}


@dataclass(frozen=True)
class BudgetRow:
    """One budget row.

    Attributes
    ----------
    term : Term
        The stored term (estimate, u, c, |c·u|, share).
    contribution : float
        u_i(y) = c_i·u(x_i), signed, in the unit of the measurand.
    share : float
        u_i²(y)/u_c²(y) as stored (sums to 1 over the terms; correlations make it an
        apportionment, see the record's ``variance_share``).
    """

    term: Term
    contribution: float
    share: float

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.term.name, "contribution": self.contribution, "share": self.share}


@dataclass(frozen=True)
class RowGroup:
    """Rows of one origin under a sub-heading.

    Attributes
    ----------
    heading : str
        ``"A_TR: input module amplifier, file data/amplifier_history.csv"`` or
        ``"typed into the spec"``.
    rows : tuple of BudgetRow
    share : float
        Sum of the rows' shares.
    """

    heading: str
    rows: tuple[BudgetRow, ...]
    share: float

    def to_dict(self) -> dict[str, Any]:
        return {"heading": self.heading, "share": self.share,
                "rows": [r.to_dict() for r in self.rows]}


def _files_text(paths: list[str]) -> str:
    if not paths:
        return ""
    return (", file " if len(paths) == 1 else ", files ") + ", ".join(paths)


def _origin_of(b: Budget) -> dict[str, tuple[str, str]]:
    """term name -> (group key, heading) for every quantity an input module returned."""
    out: dict[str, tuple[str, str]] = {}
    modules = b.run.get("modules") or {}
    if not isinstance(modules, dict):
        return out
    by_name: dict[str, Quantity] = {q.name: q for q in b.inputs}
    for name, mod in modules.items():
        if not isinstance(mod, dict):
            continue
        quantities = [str(x) for x in mod.get("quantities") or []]
        paths: list[str] = []
        for qn in quantities:
            q = by_name.get(qn)
            for f in (q.provenance.files if q is not None else ()):
                if f.path not in paths:
                    paths.append(f.path)
        heading = f"{name}: input module {mod.get('module', '?')}{_files_text(paths)}"
        for qn in quantities:
            out[qn] = (f"module:{name}", heading)
    return out


def _spec_heading(b: Budget) -> str:
    spec = b.run.get("spec_file")
    return f"typed into the spec{' ' + str(spec) if spec else ''}"


def grouped_rows(b: Budget, m: Measurand) -> tuple[RowGroup, ...]:
    """The budget rows of ``m`` grouped by origin (see the module docstring).

    Parameters
    ----------
    b : Budget
        The budget ``m`` belongs to (its inputs and ``run.modules`` name the origins).
    m : Measurand

    Returns
    -------
    tuple of RowGroup
        Every term of ``m`` exactly once. A term that no module returned and that is not
        among ``b.inputs`` (a record edited by hand) goes to the spec group.
    """
    origin = _origin_of(b)
    spec_key, spec_heading = "spec", _spec_heading(b)
    groups: dict[str, tuple[str, list[BudgetRow]]] = {}
    for t in m.terms:
        key, heading = origin.get(t.name, (spec_key, spec_heading))
        row = BudgetRow(term=t, contribution=math.copysign(t.contribution, t.sensitivity)
                        if t.sensitivity != 0 else t.contribution, share=t.variance_share)
        groups.setdefault(key, (heading, []))[1].append(row)
    out = []
    for heading, rows in groups.values():
        rows.sort(key=lambda r: -r.share)
        out.append(RowGroup(heading=heading, rows=tuple(rows),
                            share=sum(r.share for r in rows)))
    out.sort(key=lambda g: -g.share)
    return tuple(out)


def distribution_name(t: Term) -> str:
    """The probability distribution of a row as the standards name it (``student-t`` → ``t``)."""
    return _DISTRIBUTION_NAMES.get(t.distribution, t.distribution)


def column_headings(symbol: str, unit: str) -> dict[str, str]:
    """Plain-text column headings of the budget table of measurand ``symbol`` in ``unit``.

    The symbols are those of JCGM 100 and EA-4/02: X_i, x_i, u(x_i), ν_i, c_i, u_i(y),
    u_c(y); the contribution's heading states its unit as ``u_i(y) / unit`` (ISO 80000-1
    quantity/unit notation; a compound unit in parentheses: ``/ (µA/A)``), dimensionless
    outputs without a unit.
    """
    if unit in ("", "1"):
        per_unit = ""
    else:
        per_unit = f" / ({unit})" if any(c in unit for c in "/ ·") else f" / {unit}"
    return {
        "quantity": "X_i", "estimate": "x_i", "u": "u(x_i)", "type": "type", "dof": "ν_i",
        "distribution": "distribution", "c": "c_i",
        "contribution": f"u_i({symbol}){per_unit}", "share": f"u_i²/u_c²({symbol})",
    }


def _bracket(unit: str) -> str:
    return f"({unit})" if any(c in unit for c in "/ ·*") else unit


def sensitivity_unit(y_unit: str, x_unit: str) -> str:
    """The unit of c_i = ∂y/∂x_i: the output's unit over the input's (``"pA/Ω"``, ``"A/V"``;
    ``"pA"`` for a dimensionless input, ``"1/Ω"`` for a dimensionless output, ``""`` when both
    are dimensionless or the units are the same). Written, not simplified, so a row reads as
    "per unit of this input" (JCGM 100 §5.1.3: c_i in units of y per unit of x_i)."""
    y = "" if y_unit in ("", "1") else y_unit
    x = "" if x_unit in ("", "1") else x_unit
    if not x:
        return y
    if x == y:
        return ""
    return f"{_bracket(y) if y else '1'}/{_bracket(x)}"


_EIGHTHS = " ▏▎▍▌▋▊▉"


def text_bar(share: float, width: int = 12) -> str:
    """A bar of ``width`` character cells for a share in [0, 1], in eighths of a cell.

    >>> text_bar(0.5, 4)
    '██  '
    >>> text_bar(1.0, 4)
    '████'

    A share above 0 too small for one eighth still shows one thin stroke (``▏``), so that a
    row that contributes is never drawn as nothing; shares outside [0, 1] (rounding) are
    clipped.
    """
    s = min(max(share if math.isfinite(share) else 0.0, 0.0), 1.0)
    eighths = round(s * width * 8)
    if eighths == 0 and s > 0:
        eighths = 1
    full, part = divmod(eighths, 8)
    bar = "█" * full + (_EIGHTHS[part] if part else "")
    return bar.ljust(width)
