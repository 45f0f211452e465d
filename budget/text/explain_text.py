"""The answers of ``budget explain`` as text: the overview of every term, and the
fixed-section answer for one term (the auditor's "where does this number come from?")."""

from __future__ import annotations

from typing import TYPE_CHECKING

from ..budget_rows import column_headings, distribution_name, sensitivity_unit, text_bar
from ..fmt import fmt_dof, fmt_num, fmt_rows, fmt_share, fmt_u, fmt_value, plain, with_u
from .tables import WIDTH, section, table
from .tables import unit_suffix as _unit

if TYPE_CHECKING:  # pragma: no cover - annotations only
    from ..explain import Explanation, Overview

__all__ = ["diagnostic_lines", "distribution_words", "explain_overview_text",
           "explain_term_text", "plain", "with_u"]

_MAX_DIAGNOSTIC_LINES = 40   # longer module diagnostics are cut; --json holds them all


def explain_overview_text(ov: Overview) -> str:
    """Every term of every measurand of an :func:`budget.explain.overview`, largest share first.

    Parameters
    ----------
    ov : Overview
        The overview answer.

    Returns
    -------
    str
        Per measurand a table of the terms (the budget table's columns: X_i, x_i, u(x_i),
        type, ν_i, distribution, c_i, signed u_i(y), share u_i²/u_c² with a bar; then the source, cut to fit :data:`~budget.text.tables.WIDTH` columns), then
        the result line; then a hint how to ask about one term.
    """
    out = [ov.title, "=" * len(ov.title)]
    for mo in ov.measurands:
        m = mo.measurand
        out += ["", f"{m.name} = {m.expression}   (terms by share of u_c², largest first)"]
        rows, sources = [], []
        for r in mo.rows:
            t = r.term
            signed = ("-" if t.sensitivity < 0 else "") + fmt_u(t.contribution)
            rows.append([t.name, fmt_value(t.value, t.standard_uncertainty) + _unit(t.unit),
                         fmt_u(t.standard_uncertainty) + _unit(t.unit), t.evaluation,
                         fmt_dof(t.dof), distribution_name(t), fmt_num(t.sensitivity, 4)
                         + _unit(sensitivity_unit(m.unit, t.unit)), signed,
                         f"{text_bar(t.variance_share, 4)} {fmt_share(t.variance_share):>7}"])
            sources.append(r.source)
        h = column_headings(m.name, m.unit)
        headers = [h["quantity"], h["estimate"], h["u"], h["type"], h["dof"],
                   h["distribution"], h["c"], f"u_i({m.name})", h["share"]]
        # the source column gets what is left of the 100 columns (at least 12 characters)
        used = len(table(headers, rows).split("\n")[1])
        room = max(12, WIDTH - used - 2)
        for row, src in zip(rows, sources):
            row.append(src if len(src) <= room else src[:room - 1] + "…")
        tab = table(headers + ["source"], rows, right={1, 2, 4, 6, 7})
        out += [ln.rstrip() for ln in tab.split("\n")]
        mu = _unit(m.unit)
        out.append(f"  {m.name} = {fmt_value(m.value, m.standard_uncertainty)}{mu}, "
                   f"u_c = {fmt_u(m.standard_uncertainty)}{mu}, U = "
                   f"{fmt_u(m.expanded_uncertainty)}{mu} (k = {m.coverage_factor:.2f}, "
                   f"ν_eff = {fmt_dof(m.effective_dof)})")
    out += ["", "budget explain SPEC TERM answers for one term"]
    return "\n".join(out)


def distribution_words(d: dict, unit: str) -> str:
    """A distribution's ``to_dict()`` in words: ``"rectangular on [-1, 1] Ω"``.

    Parameters
    ----------
    d : dict
        The distribution as stored in the record (``kind`` plus its parameters).
    unit : str
        The quantity's unit, shown after bounds.
    """
    kind = d.get("kind", "")
    if kind in ("normal", "student-t"):
        extra = f", ν = {fmt_dof(d.get('dof'))}" if kind == "student-t" else ""
        return f"{kind} (centre {d.get('loc', 0):.10g}, scale {d.get('scale', 0):.6g}{extra})"
    if kind == "sampled":
        n = len(d.get("quantiles", []))
        return (f"sampled (mean {d.get('loc', 0):.10g}, standard deviation "
                f"{d.get('scale', 0):.6g}; quantile function kept at {n} points)")
    if "low" in d:
        return f"{kind} on [{d['low']:.10g}, {d['high']:.10g}]{_unit(unit)}"
    return kind


#: sibling keys that hold the standard uncertainty of a value in module diagnostics
_U_OF = {"correction": ("standard_uncertainty",), "value": ("standard_uncertainty",),
         "predicted_value": ("predicted_standard_uncertainty",),
         "mean_difference": ("u",), "mean": ("u", "standard_uncertainty")}


def percent_change(ch: float) -> str:
    """A relative change in per cent with the digits that show it: ``−0.0042 %``, not
    ``−0.0 %``; exactly zero reads ``no change``."""
    if ch == 0:
        return "unchanged"
    pc = 100 * ch
    text = f"{pc:+.1f}" if abs(pc) >= 0.1 else f"{pc:+.2g}"
    return text.replace("-", "−") + " %"


def _is_uncertainty(key: str) -> bool:
    k = key.lower()
    return (k.startswith("u_") or k in ("u", "std_errors", "standard_uncertainty")
            or k.endswith(("_standard_uncertainty", "_uncertainty", "_sd", "_sd_v"))
            or k.startswith(("residual_sd", "u(")))


def _u_for(d: dict, k: str, i: int | None = None) -> float | None:
    keys = (f"u_{k}", f"{k}_u", f"{k}_uncertainty", f"{k}_standard_uncertainty") + \
        _U_OF.get(k, ())
    for key in keys:
        u = d.get(key)
        if isinstance(u, (int, float)) and not isinstance(u, bool):
            return float(u)
    if k == "params" and isinstance(d.get("std_errors"), list) and i is not None:
        se = d["std_errors"]
        if i < len(se) and isinstance(se[i], (int, float)):
            return float(se[i])
    return None


def diagnostic_lines(d: dict, prefix: str = "", *, full: bool = False) -> list[str]:
    """An input module's diagnostics as ``key: value`` lines.

    Parameters
    ----------
    d : dict
        JSON-ready diagnostics; nested dicts become dotted keys.
    prefix : str, default ""
        Put before every key (used for the nesting).
    full : bool, default False
        Every float at full precision (``repr``), lists of any length.

    Returns
    -------
    list of str
        One line per leaf. Figures are listed by title (the report draws them); lists of up
        to six plain values are shown, longer ones are counted. A float whose uncertainty sits
        beside it (``u_X``, ``X_uncertainty``, ``params`` with ``std_errors``, a
        ``correction`` with its ``standard_uncertainty`` …) is shown to the digits that
        uncertainty supports, others to ten significant digits; None, True and False read
        "not computed", "yes" and "no".
    """
    def one(k: str, x: object, i: int | None = None) -> str:
        if full and isinstance(x, float):
            return repr(x)
        if isinstance(x, float) and _is_uncertainty(k):
            return fmt_u(x)             # two significant digits (JCGM 100 §7.2.6)
        return with_u(x, _u_for(d, k, i)) if isinstance(x, float) else plain(x)

    out = []
    for k, v in d.items():
        key = f"{prefix}{k}"
        if k == "figures" and isinstance(v, list):
            titles = [f.get("title") or f.get("id", "") for f in v if isinstance(f, dict)]
            out.append(f"{key}: {'; '.join(titles)} (drawn in the report)")
        elif isinstance(v, dict):
            out += diagnostic_lines(v, key + ".", full=full)
        elif isinstance(v, list):
            if not v:
                out.append(f"{key}: none")
            elif (len(v) <= 6 or full) and all(isinstance(x, (int, float, str, bool))
                                               or x is None for x in v):
                out.append(f"{key}: " + ", ".join(one(k, x, i) for i, x in enumerate(v)))
            else:
                out.append(f"{key}: [{len(v)} entries; see --json]")
        else:
            out.append(f"{key}: {one(k, v)}")
    return out


def explain_term_text(expl: Explanation, *, full: bool = False) -> str:
    """The fixed-section answer for one term, once per measurand whose budget holds it.

    Parameters
    ----------
    expl : Explanation
        From :func:`budget.explain.explain_term`.
    full : bool, default False
        Estimates and diagnostics at full precision (``repr`` of the record's floats).

    Returns
    -------
    str
        Sections in a fixed order: what it is, estimate, standard uncertainty, distribution
        and ν with their reasons, the sensitivity (symbolic derivative and its value), the
        contribution, Type A/B, source files with SHA-256, correlations, the module's
        diagnostics (once per module; at most 40 lines), notes, what-if lines and cautions.
    """
    out: list[str] = []
    shown: set[str] = set()          # modules whose diagnostics were shown already
    for a in expl.answers:
        t, unit, munit = a.term, _unit(a.term.unit), _unit(a.measurand_unit)
        head = f"{t.name} in the budget of {a.measurand}   ({expl.title})"
        out += ["", head, "-" * min(len(head), WIDTH)] if out else [head, "-" * min(len(head), WIDTH)]
        out += section("What it is", a.description or "(no description in the spec)")
        shown_x = repr(float(t.value)) if full else with_u(float(t.value),
                                                            t.standard_uncertainty)
        out += section("Estimate", f"{t.name} = {shown_x}{unit}")
        out += section("Std uncertainty", f"u({t.name}) = {fmt_u(t.standard_uncertainty)}{unit}"
                       f" (k = 1; full precision {t.standard_uncertainty!r})")
        out += section("Distribution", distribution_words(a.distribution, t.unit))
        out += section("  why", a.distribution_reason or "(not stated)")
        out += section("Degrees of freedom", f"ν = {fmt_dof(t.dof)}")
        out += section("  why", a.dof_reason or "(not stated)")
        c_line = f"c = ∂{a.measurand}/∂{t.name} = {a.derivative or '(not recorded)'}"
        out += section("Sensitivity", c_line)
        check = ("" if a.derivative_value is None else
                 f"; the derivative above evaluated at the estimates gives {a.derivative_value:.10g}")
        out += section("", f"= {t.sensitivity:.10g}{munit}{' per ' + t.unit if unit else ''}"
                       f" at the input estimates{check}")
        for name, expr in a.model:
            out += section("  model", f"{name} = {expr}")
        if a.module_expression:
            out += section("  module", f"{a.module_input} = {a.module_expression} (the "
                           f"'{a.module_kind}' module's expression, inlined into the model)")
        out += section("  how obtained", "exact symbolic partial derivative of the model with "
                       "every earlier output and input-module expression substituted, "
                       "evaluated at the input estimates (JCGM 100 eq. 10-11)")
        out += section("Contribution", f"c·u = {t.sensitivity * t.standard_uncertainty:.4g}"
                       f"{munit}, |c·u| = {fmt_u(t.contribution)}{munit}; share of u_c² = "
                       f"{fmt_share(t.variance_share)}")
        kind = ("statistical analysis of series of observations (JCGM 100 §4.2)"
                if t.evaluation == "A" else "other means than statistics of observations "
                "(JCGM 100 §4.3)")
        out += section("Evaluation", f"Type {t.evaluation}: {kind}")
        out += section("Source", f"{a.method or '(not stated)'} [origin: {a.origin or '?'}]")
        for f in a.files:
            out += section("  file", f"{f.path}" + (f", {fmt_rows(f.rows)}" if f.rows else ""))
            out += section("  sha256", f.sha256)
        out += section("Correlated with", ", ".join(f"{n} (r = {r:.3g})" for n, r in
                                                    a.correlations) or "none")
        if a.module_input in shown:
            out += section(f"Module '{a.module_kind}'", f"input [inputs.{a.module_input}]; "
                           "its diagnostics are shown above")
        elif a.module_input:
            shown.add(a.module_input)
            diag = diagnostic_lines(a.diagnostics, full=full)
            more = len(diag) - _MAX_DIAGNOSTIC_LINES
            if not full:
                diag = diag[:_MAX_DIAGNOSTIC_LINES] + (
                    [f"… {more} more lines; see --full or --json"] if more > 0 else [])
            out += section(f"Module '{a.module_kind}'", f"input [inputs.{a.module_input}]")
            for ln in diag:
                out += section("", ln)
        else:
            out += section("Module diagnostics", "none (not produced by an input module)")
        for n in a.notes:
            out += section("Note", n)
        for k, w in enumerate(a.what_if):
            change = "" if k == 0 or w.relative_change is None else \
                f" ({percent_change(w.relative_change)})"
            out += section("What if" if k == 0 else "",
                           f"{w.label + ':':<20}U = {fmt_u(w.expanded_uncertainty)}{munit}{change}"
                           f"; u_c = {fmt_u(w.standard_uncertainty)}, k = {w.coverage_factor:.2f}"
                           f", ν_eff = {fmt_dof(w.effective_dof)}")
        for ctn in a.cautions:
            out += section("Caution", ctn)
    return "\n".join(out)
