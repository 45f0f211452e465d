"""Two budgets side by side (``budget explain --against OTHER.json``): per measurand the result
of each record and, per term, its signed contribution u_i(y) = c_i·u(x_i) and share of u_c²
in each, with the change. Read from the two records alone; numbers at full precision (the
renderer rounds)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from .result import Budget, Measurand, dof_out

__all__ = ["TermDiff", "MeasurandDiff", "BudgetDiff", "diff_budgets"]


@dataclass(frozen=True)
class TermDiff:
    """One term in both budgets; None where a budget has no such row."""

    name: str
    contribution_a: float | None    # signed c·u in the measurand's unit
    contribution_b: float | None
    share_a: float | None
    share_b: float | None

    @property
    def change(self) -> str:
        if self.contribution_a is None:
            return "only in the other"
        if self.contribution_b is None:
            return "only in this"
        return ""

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "contribution_a": self.contribution_a,
                "contribution_b": self.contribution_b, "share_a": self.share_a,
                "share_b": self.share_b}


@dataclass(frozen=True)
class MeasurandDiff:
    a: Measurand
    b: Measurand
    terms: tuple[TermDiff, ...]     # largest share in either first

    def to_dict(self) -> dict[str, Any]:
        def res(m: Measurand) -> dict[str, Any]:
            return {"value": m.value, "unit": m.unit,
                    "standard_uncertainty": m.standard_uncertainty,
                    "effective_dof": dof_out(m.effective_dof),
                    "coverage_factor": m.coverage_factor,
                    "expanded_uncertainty": m.expanded_uncertainty}
        return {"name": self.a.name, "a": res(self.a), "b": res(self.b),
                "terms": [t.to_dict() for t in self.terms]}


@dataclass(frozen=True)
class BudgetDiff:
    title_a: str
    title_b: str
    measurands: tuple[MeasurandDiff, ...]
    only_a: tuple[str, ...]         # measurands in one record only
    only_b: tuple[str, ...]
    notes: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        return {"title_a": self.title_a, "title_b": self.title_b,
                "measurands": [m.to_dict() for m in self.measurands],
                "only_a": list(self.only_a), "only_b": list(self.only_b),
                "notes": list(self.notes)}


def diff_budgets(a: Budget, b: Budget, measurand: str | None = None) -> BudgetDiff:
    """The two budgets side by side (``a`` is "this", ``b`` "the other").

    A measurand is matched by name; a unit that differs between the two is stated in
    ``notes`` (the numbers are then not comparable and no change is implied).
    """
    names_b = {m.name: m for m in b.measurands}
    out, notes = [], []
    for ma in a.measurands:
        if measurand is not None and ma.name != measurand:
            continue
        mb = names_b.get(ma.name)
        if mb is None:
            continue
        if ma.unit != mb.unit:
            notes.append(f"{ma.name}: unit {ma.unit or '1'} here, {mb.unit or '1'} in the "
                         "other record; the columns are not comparable")
        ta = {t.name: t for t in ma.terms}
        tb = {t.name: t for t in mb.terms}
        rows = []
        for name in list(ta) + [n for n in tb if n not in ta]:
            x, y = ta.get(name), tb.get(name)
            rows.append(TermDiff(
                name, None if x is None else x.sensitivity * x.standard_uncertainty,
                None if y is None else y.sensitivity * y.standard_uncertainty,
                None if x is None else x.variance_share, None if y is None else y.variance_share))
        rows.sort(key=lambda r: -max(abs(r.share_a or 0.0), abs(r.share_b or 0.0)))
        out.append(MeasurandDiff(ma, mb, tuple(rows)))
    in_a = [m.name for m in a.measurands]
    return BudgetDiff(a.title, b.title, tuple(out),
                      tuple(n for n in in_a if n not in names_b),
                      tuple(n for n in names_b if n not in in_a), tuple(notes))
