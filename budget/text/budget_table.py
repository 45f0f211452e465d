"""The budget table and result lines of a Budget, as ``budget run`` shows them."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

from ..budget_rows import (
    column_headings,
    distribution_name,
    grouped_rows,
    sensitivity_unit,
    text_bar,
)
from ..fmt import fmt_dof, fmt_num, fmt_share, fmt_u, fmt_value
from .tables import grouped_table, unit_suffix

if TYPE_CHECKING:  # pragma: no cover - annotations only
    from ..result import Budget

__all__ = ["budget_text", "budget_rows_text"]

_BAR = 12          # cells of the share bar (one cell = 1/12 of u_c²)


def budget_rows_text(b: Budget, m) -> str:
    """The budget table of one measurand, rows grouped by origin (:mod:`budget.budget_rows`).

    Columns: X_i, x_i and u(x_i) (with their unit), type (A/B), ν_i, distribution, c_i (with its
    unit, y's over x_i's, :func:`~budget.budget_rows.sensitivity_unit`), the
    signed contribution u_i(y) = c_i·u(x_i) in the unit of y, and the share u_i²/u_c² as a
    text bar of :data:`_BAR` cells with the percentage beside it.
    """
    h = column_headings(m.name, m.unit)
    headers = [h["quantity"], h["estimate"], h["u"], h["type"], h["dof"], h["distribution"],
               h["c"], h["contribution"], h["share"]]
    groups = []
    for g in grouped_rows(b, m):
        rows = []
        for r in g.rows:
            t = r.term
            rows.append([t.name, fmt_value(t.value, t.standard_uncertainty)
                         + unit_suffix(t.unit),
                         fmt_u(t.standard_uncertainty) + unit_suffix(t.unit), t.evaluation,
                         fmt_dof(t.dof), distribution_name(t),
                         fmt_num(t.sensitivity, 4) + unit_suffix(sensitivity_unit(m.unit,
                                                                                  t.unit)),
                         fmt_u(abs(r.contribution)) if r.contribution >= 0
                         else "-" + fmt_u(abs(r.contribution)),
                         f"{text_bar(r.share, _BAR)} {fmt_share(r.share):>7}"])
        groups.append((g.heading, rows))
    return grouped_table(headers, groups, right={1, 2, 4, 6, 7})


def budget_text(b: Budget) -> str:
    """The budget table(s) and result lines of a Budget.

    Parameters
    ----------
    b : Budget
        An evaluated budget (from :func:`budget.evaluate` or a stored record).

    Returns
    -------
    str
        The title, then for each measurand its model, its budget table (rows grouped by
        origin, see :func:`budget_rows_text`), the estimate with u_c and ν_eff, the result
        with U and k, the second-order contribution if any and the Monte Carlo comparison
        if it ran; then the run's notes. Numbers are rounded by :mod:`budget.fmt` (two
        significant digits of uncertainties).
    """
    out = [b.title, "=" * len(b.title)]
    from ..nominal import nominal_point, nominal_text
    point = nominal_point(b)
    if point is not None:
        out += ["", nominal_text(point)]
    for m in b.measurands:
        unit = f" {m.unit}" if m.unit else ""   # unlike the estimate column, shows a unit "1"
        out.append("")
        out.append(f"{m.name} = {m.expression}")
        out.append(budget_rows_text(b, m))
        out.append("")
        p = m.coverage_probability
        out.append(f"  {m.name} = {fmt_value(m.value, m.standard_uncertainty)}{unit}, "
                   f"u_c = {fmt_u(m.standard_uncertainty)}{unit}, ν_eff = {fmt_dof(m.effective_dof)}")
        head = (f"  result: {m.name} = ({fmt_value(m.value, m.expanded_uncertainty)} ± "
                f"{fmt_u(m.expanded_uncertainty)}){unit}, U with k = {m.coverage_factor:.2f}")
        if b.run.get("coverage_factor_fixed") is not None:
            # a fixed k does not give the spec's p: say what it gives at ν_eff (JCGM 100 G.3)
            pk = m.coverage_probability_of_k
            if pk is None:
                from ..coverage import coverage_probability_of
                pk = coverage_probability_of(m.coverage_factor, m.effective_dof)
            mc = b.mc(m.name)
            mc_p = (f"; Monte Carlo: {100 * mc.linear_interval_probability:.3g} % of trials "
                    "within y ± U" if mc is not None and mc.linear_interval_probability
                    is not None else "")
            out.append(f"{head} (fixed in the spec): coverage probability "
                       f"{100 * pk:.3g} % at ν_eff = {fmt_dof(m.effective_dof)}{mc_p}")
        else:
            out.append(f"{head} for a coverage probability of about {100 * p:g} %")
        if m.second_order_variance:
            out.append(f"  includes second-order terms: "
                       f"{fmt_u(math.sqrt(abs(m.second_order_variance)))}{unit} in quadrature")
        mc = b.mc(m.name)
        if mc is not None:
            verdict = {"validated": "validated", "inconclusive": "neither validated nor "
                       "shown not validated (INCONCLUSIVE)"}.get(mc.verdict, "NOT validated")
            how = ", adaptive" if mc.adaptive else ", fixed: not stabilised"
            mu = unit_suffix(m.unit)    # the Monte Carlo numbers are in the display unit too
            out.append(f"  Monte Carlo ({mc.trials:,} trials{how}): "
                       f"y = {fmt_value(mc.value, mc.standard_uncertainty)}{mu}, "
                       f"u = {fmt_u(mc.standard_uncertainty)}{mu}, {100 * p:g} % "
                       f"{mc.interval_kind} interval "
                       f"[{fmt_value(mc.interval_low, mc.standard_uncertainty)}, "
                       f"{fmt_value(mc.interval_high, mc.standard_uncertainty)}]{mu}")
            out.append(f"  linear result {verdict} (JCGM 101 §8: d_low = {fmt_num(mc.d_low, 2)}"
                       f"{mu}, d_high = {fmt_num(mc.d_high, 2)}{mu}, "
                       f"δ = {fmt_num(mc.tolerance, 2)}{mu})")
    shown_as_warning = {w.message for w in b.warnings}  # printed on stderr instead
    for note in b.run.get("notes", []):
        if note not in shown_as_warning:
            out.append(f"note: {note}")
    return "\n".join(out)
