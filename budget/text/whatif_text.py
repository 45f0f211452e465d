"""``budget explain`` what-if scenarios (--recalibrate, --longer) and the side-by-side budget
of two records (--against) as text."""

from __future__ import annotations

from typing import TYPE_CHECKING

from ..fmt import fmt_dof, fmt_share, fmt_u, fmt_value
from .explain_text import percent_change
from .tables import section, table
from .tables import unit_suffix as _unit

if TYPE_CHECKING:  # pragma: no cover - annotations only
    from ..explain_diff import BudgetDiff
    from ..explain_whatif import Scenario

__all__ = ["scenarios_text", "diff_text"]


def scenarios_text(scenarios: tuple[Scenario, ...]) -> str:
    """One block per scenario: the recombined U (with its change), u_c, k, ν_eff and how the
    scenario was obtained."""
    out = ["", "What if (recombined from the record; JCGM 100 law of propagation)"]
    for s in scenarios:
        w, mu = s.result, _unit(s.unit)
        change = "" if w.relative_change is None else f" ({percent_change(w.relative_change)})"
        out += section(s.measurand, f"{w.label}: U = {fmt_u(w.expanded_uncertainty)}{mu}"
                       f"{change}; u_c = {fmt_u(w.standard_uncertainty)}{mu}, k = "
                       f"{w.coverage_factor:.2f}, ν_eff = {fmt_dof(w.effective_dof)}")
        out += section("  how", s.basis)
    return "\n".join(out)


def _signed(x: float | None) -> str:
    return "–" if x is None else ("−" if x < 0 else "") + fmt_u(abs(x))


def diff_text(d: BudgetDiff, label_a: str, label_b: str) -> str:
    """Per measurand: both results, then every term's signed u_i(y) and share in each record
    with the change of share (largest share first)."""
    out = [f"Budget side by side: A = {label_a} ({d.title_a})",
           f"                    B = {label_b} ({d.title_b})"]
    for md in d.measurands:
        a, b, mu = md.a, md.b, _unit(md.a.unit)
        out += ["", f"{a.name}"]
        out += [f"  A: {a.name} = {fmt_value(a.value, a.standard_uncertainty)}{mu}, u_c = "
                f"{fmt_u(a.standard_uncertainty)}, U = {fmt_u(a.expanded_uncertainty)} "
                f"(k = {a.coverage_factor:.2f}, ν_eff = {fmt_dof(a.effective_dof)})",
                f"  B: {b.name} = {fmt_value(b.value, b.standard_uncertainty)}{_unit(b.unit)}, "
                f"u_c = {fmt_u(b.standard_uncertainty)}, U = {fmt_u(b.expanded_uncertainty)} "
                f"(k = {b.coverage_factor:.2f}, ν_eff = {fmt_dof(b.effective_dof)})"]
        if a.expanded_uncertainty > 0:
            dy = b.value - a.value
            side = "B higher" if dy > 0 else "B lower" if dy < 0 else "the same"
            out.append(f"  from A to B: U {percent_change(b.expanded_uncertainty / a.expanded_uncertainty - 1)}"
                       f"; y {side}" + (f" by {fmt_u(abs(dy))}{mu}" if dy else ""))
        rows = []
        for t in md.terms:
            dshare = ("" if t.share_a is None or t.share_b is None else
                      f"{100 * (t.share_b - t.share_a):+.1f} pp".replace("-", "−"))
            rows.append([t.name, _signed(t.contribution_a), _signed(t.contribution_b),
                         "–" if t.share_a is None else fmt_share(t.share_a),
                         "–" if t.share_b is None else fmt_share(t.share_b),
                         dshare or t.change])
        tab = table(["quantity X_i", f"u_i({a.name}) A", f"u_i({a.name}) B", "share A",
                     "share B", "change of share"], rows)
        out += ["  " + ln.rstrip() for ln in tab.split("\n")]
    for n in d.only_a:
        out.append(f"\n{n}: only in A")
    for n in d.only_b:
        out.append(f"\n{n}: only in B")
    for n in d.notes:
        out.append(f"note: {n}")
    return "\n".join(out)
