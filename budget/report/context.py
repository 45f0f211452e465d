"""What the templates see: a Budget turned into display text (rounded by :mod:`budget.fmt`).

The templates only lay out; every number is formatted here, every figure drawn here, so the
HTML of a budget depends on nothing but the budget (and the software version): no clock, no
file system. Text from the spec, data files or a record stays plain ``str``; the jinja
environment escapes it on output.
"""

from __future__ import annotations

import copy
import hashlib
import math
from typing import Any

from markupsafe import Markup, escape

from ..budget_rows import distribution_name, grouped_rows, sensitivity_unit
from ..errors import DataError
from ..fmt import fmt_dof, fmt_num, fmt_rows, fmt_share, fmt_u
from ..nominal import nominal_point, nominal_text
from ..result import Budget, Measurand
from . import figures as figs
from .diagnostic_labels import diagnostic_table
from .model_view import model_view, symbol_html
from .statement import (
    RQMC_DEVIATION,
    coverage_statement,
    fixed_k_probability,
    monte_carlo_method,
    pct,
    pct_of_k,
    result_line,
    stated_result,
)
from .text import sci, unit_suffix, value_u

__all__ = ["build_context", "FIELD_LABELS", "CERTIFICATE_ITEMS", "result_line",
           "coverage_statement"]

#: [report] key -> label in the header blocks
FIELD_LABELS = {
    "laboratory": "Laboratory", "laboratory_address": "Address of the laboratory",
    "accreditation": "Accreditation", "report_number": "Report number",
    "certificate_number": "Certificate number", "item": "Item", "item_serial": "Serial number",
    "manufacturer": "Manufacturer", "item_condition": "Condition of the item",
    "customer": "Customer", "customer_address": "Address of the customer",
    "operator": "Measured by", "approver": "Approved by", "approver_role": "Role of the approver",
    "measurement_date": "Date(s) of measurement", "issue_date": "Date of issue",
    "receipt_date": "Date of receipt of the item", "method": "Method", "procedure": "Procedure",
    "traceability": "Metrological traceability", "conditions": "Environmental conditions",
    "location": "Location of the measurement", "remarks": "Remarks", "measurand": "Measurand",
    "adjustment": "Adjustment",
    "deviations": "Deviations from, additions to or exclusions from the method",
    "external_providers": "Results from external providers",
    "decision_rule": "Decision rule", "conformity": "Statement of conformity",
}

#: What ISO/IEC 17025:2017 asks a calibration certificate to state, and the [report] key that
#: holds it: (key, clause). A draft lists the ones still empty.
CERTIFICATE_ITEMS = (
    ("laboratory", "7.8.2.1 b"), ("laboratory_address", "7.8.2.1 b"), ("location", "7.8.2.1 c"),
    ("certificate_number", "7.8.2.1 d"), ("customer", "7.8.2.1 e"),
    ("customer_address", "7.8.2.1 e"), ("method", "7.8.2.1 f"), ("item", "7.8.2.1 g"),
    ("item_serial", "7.8.2.1 g"), ("receipt_date", "7.8.2.1 h"),
    ("measurement_date", "7.8.2.1 i"), ("issue_date", "7.8.2.1 j"),
    ("deviations", "7.8.2.1 n"), ("approver", "7.8.2.1 o"), ("approver_role", "7.8.2.1 o"),
    ("external_providers", "7.8.2.1 p"),
    ("conditions", "7.8.4.1 b"), ("traceability", "7.8.4.1 c"),
)

_MAX_DIAGNOSTICS = 40          # scalar diagnostics shown per module (the record has them all)


def _s(x: Any) -> str:
    return "" if x is None else str(x)


def _distribution_text(q) -> str:
    d, u = q.distribution, q.standard_uncertainty
    unit = unit_suffix(q.unit)
    if d.kind == "normal":
        return "normal"
    if d.kind == "student-t":
        return f"scaled and shifted t, ν = {fmt_dof(d.dof)}, scale {sci(fmt_u(d.scale))}{unit}"
    if d.kind == "sampled":
        return (f"sampled (quantile function of the module's samples), skewness "
                f"{fmt_num(d.skewness, 2)}")
    bounds = f"[{value_u(d.low, u)}, {value_u(d.high, u)}]{unit}"
    if d.kind == "triangular":
        return f"triangular on {bounds}, mode {value_u(d.loc, u)}"
    if d.kind == "trapezoidal":
        return f"trapezoidal on {bounds}, β = {fmt_num(d.beta, 3)}"
    if d.kind == "arcsine":
        return f"arcsine (U-shaped) on {bounds}"
    return f"{d.kind} on {bounds}"


def _term_row(r, y_unit: str = "") -> dict[str, Any]:
    t = r.term
    share = min(max(r.share, 0.0), 1.0)
    return {
        "name": t.name, "estimate": value_u(t.value, t.standard_uncertainty),
        "unit": "" if t.unit == "1" else t.unit,
        "u": sci(fmt_u(t.standard_uncertainty)) + unit_suffix(t.unit),
        "distribution": distribution_name(t), "dof": fmt_dof(t.dof), "type": t.evaluation,
        "c": sci(fmt_num(t.sensitivity, 4)) + unit_suffix(sensitivity_unit(y_unit, t.unit)),
        "contribution": sci(("-" if r.contribution < 0 else "") + fmt_u(abs(r.contribution))),
        "share": fmt_share(r.share), "bar_width": f"{max(100 * share, 1.5) if share > 0 else 0:.2f}",
        "derivative": t.derivative,
    }


def _term_groups(b: Budget, m: Measurand) -> list[dict[str, Any]]:
    """The budget rows of ``m`` grouped by origin (see :mod:`budget.budget_rows`)."""
    return [{"heading": g.heading, "share": fmt_share(g.share),
             "rows": [_term_row(r, m.unit) for r in g.rows]} for g in grouped_rows(b, m)]


def _mc_block(b: Budget, m: Measurand, *, draw: bool) -> dict[str, Any] | None:
    mc = b.mc(m.name)
    if mc is None:
        return None
    u = mc.standard_uncertainty
    p = f"{100 * m.coverage_probability:g} %"
    lpu_lo, lpu_hi = m.value - m.expanded_uncertainty, m.value + m.expanded_uncertainty
    word = {"validated": "validated", "inconclusive": "neither validated nor shown not to be "
            "(the check is inconclusive)"}.get(mc.verdict, "NOT validated")
    verdict = (f"The law of propagation is {word} "
               f"by the Monte Carlo method (JCGM 101 §8): the end points differ by "
               f"d_low = {sci(fmt_num(mc.d_low, 2))} and d_high = {sci(fmt_num(mc.d_high, 2))}, "
               f"against the numerical tolerance δ = {sci(fmt_num(mc.tolerance, 2))}.")
    s_lo, s_hi = mc.numerical_uncertainty
    if math.isfinite(s_lo) and math.isfinite(s_hi):
        verdict += (f" The numerical standard uncertainties of the Monte Carlo interval ends "
                    f"are {sci(fmt_num(s_lo, 2))} and {sci(fmt_num(s_hi, 2))} (from "
                    f"{mc.accuracy['batches']} batches); a d within twice them of δ leaves the "
                    "comparison inconclusive.")
    if mc.verdict == "not_validated":
        verdict += (" Report the Monte Carlo coverage interval, or review the model and the "
                    "input distributions, before relying on y ± U.")
    elif mc.verdict == "inconclusive":
        verdict += (" Run the adaptive procedure or more trials before claiming that y ± U is "
                    "validated.")
    fig = None
    if draw and mc.histogram_counts and len(mc.histogram_edges) == len(mc.histogram_counts) + 1:
        fig = figs.svg_data_uri(figs.mc_figure(
            name=m.name, unit=m.unit, value=m.value, standard_uncertainty=m.standard_uncertainty,
            expanded_uncertainty=m.expanded_uncertainty, effective_dof=m.effective_dof,
            coverage_probability=m.coverage_probability, counts=mc.histogram_counts,
            edges=mc.histogram_edges, trials=mc.trials,
            interval=(mc.interval_low, mc.interval_high), interval_kind=mc.interval_kind))
    unit = unit_suffix(m.unit)
    return {
        "trials": f"{mc.trials:,}" + (" (adaptive)" if mc.adaptive else
                                      " (fixed; not stabilised)"),
        "rows": [
            ("estimate y", value_u(m.value, m.standard_uncertainty) + unit,
             value_u(mc.value, u) + unit),
            ("standard uncertainty", sci(fmt_u(m.standard_uncertainty)) + unit,
             sci(fmt_u(u)) + unit),
            (f"{p} coverage interval",
             f"[{value_u(lpu_lo, m.standard_uncertainty)}, {value_u(lpu_hi, m.standard_uncertainty)}]{unit}",
             f"[{value_u(mc.interval_low, u)}, {value_u(mc.interval_high, u)}]{unit} "
             f"({mc.interval_kind})"),
        ],
        "validated": mc.validated, "verdict": verdict, "figure": fig,
        "stabilised": mc.stabilised,
    }


def _measurand_block(b: Budget, m: Measurand, *, draw: bool) -> dict[str, Any]:
    fixed = b.run.get("coverage_factor_fixed") is not None
    unit = unit_suffix(m.unit)
    # U/|y| says something only when y is well away from zero (not for a deviation like
    # delta_I = 0.33 ± 0.49), so it is shown only below 10 %
    rel = (sci(fmt_u(m.expanded_uncertainty / abs(m.value)))
           if m.value != 0 and m.expanded_uncertainty < 0.1 * abs(m.value) else "")
    stated = stated_result(b, m)
    if stated.method != "JCGM 100":
        rel = ""        # U/|y| is the linear U, not the stated interval's
    second = ""
    if m.second_order_variance:
        second = (f"includes the GUM's second-order terms (JCGM 100 §5.1.2 note): "
                  f"{sci(fmt_u(math.sqrt(abs(m.second_order_variance))))}{unit} in quadrature")
    return {
        "name": m.name, "unit": m.unit, "unit_sfx": unit, "expression": m.expression,
        "result_line": stated.line, "statement": stated.statement, "stated": stated,
        "value": value_u(m.value, m.expanded_uncertainty) + unit,
        "U": sci(fmt_u(m.expanded_uncertainty)) + unit,
        "u": sci(fmt_u(m.standard_uncertainty)) + unit,
        "k": f"{m.coverage_factor:.2f}",
        "p": pct_of_k(fixed_k_probability(m)) if fixed else pct(m.coverage_probability),
        "dof": fmt_dof(m.effective_dof), "relative_U": rel,
        "groups": _term_groups(b, m), "second_order": second,
        "mc": _mc_block(b, m, draw=draw),
    }


def _input_block(b: Budget, q) -> dict[str, Any]:
    p = q.provenance
    shares = []
    for m in b.measurands:
        for t in m.terms:
            if t.name == q.name:
                shares.append(f"{fmt_share(t.variance_share)} of u_c²({m.name})")
    u = q.standard_uncertainty
    return {
        "name": q.name, "description": q.description,
        "estimate": (value_u(q.value, u) if u > 0 else sci(fmt_num(q.value, 10)))
        + unit_suffix(q.unit),
        "u": (sci(fmt_u(u)) + unit_suffix(q.unit)) if u > 0 else "0 (constant)",
        "distribution": _distribution_text(q), "dof": fmt_dof(q.dof), "type": q.evaluation,
        "origin": p.origin, "method": p.method, "distribution_reason": p.distribution_reason,
        "dof_reason": p.dof_reason, "notes": list(p.notes), "shares": shares,
        "files": [{"path": f.path, "sha256": f.sha256, "rows": fmt_rows(f.rows)}
                  for f in p.files],
    }


def _module_blocks(b: Budget, *, draw: bool) -> list[dict[str, Any]]:
    out = []
    modules = b.run.get("modules") or {}
    if not isinstance(modules, dict):
        raise DataError("must be a table of input modules", field="run.modules")
    for name, mod in modules.items():
        where = f"run.modules.{name}"
        if not isinstance(mod, dict):
            raise DataError("must be a table", field=where)
        diag = mod.get("diagnostics") or {}
        if not isinstance(diag, dict):
            raise DataError("must be a table", field=f"{where}.diagnostics")
        figures = diag.get("figures") or []
        if not isinstance(figures, list):
            raise DataError("must be a list of figures", field=f"{where}.diagnostics.figures")
        drawn = []
        for i, f in enumerate(figures):
            fw = f"{where}.diagnostics.figures[{i}]"
            checked = figs.check_figure(f, fw)
            drawn.append({"id": checked["id"], "title": checked["title"],
                          "uri": figs.svg_data_uri(figs.module_figure(checked, fw))
                          if draw else None})
        out.append({"name": name, "module": _s(mod.get("module")),
                    "expression": _s(mod.get("expression")),
                    "quantities": [str(x) for x in mod.get("quantities") or []],
                    "diagnostics": diagnostic_table(diag, _MAX_DIAGNOSTICS),
                    "figures": drawn})
    return out


def _cautions(b: Budget) -> list[str]:
    out: list[str] = []
    for m in b.measurands:
        mc = b.mc(m.name)
        if mc is not None and mc.verdict == "not_validated":
            out.append(f"{m.name}: the Monte Carlo method does not validate the linear result "
                       f"at the tolerance δ = {sci(fmt_num(mc.tolerance, 2))} (JCGM 101 §8).")
        if mc is not None and mc.verdict == "inconclusive":
            out.append(f"{m.name}: the Monte Carlo check of the linear result is inconclusive "
                       f"at the tolerance δ = {sci(fmt_num(mc.tolerance, 2))} (JCGM 101 §8): "
                       "the Monte Carlo interval is not accurate enough to decide.")
        if mc is not None and mc.adaptive and not mc.stabilised:
            out.append(f"{m.name}: the adaptive Monte Carlo procedure stopped before its "
                       "results stabilised.")
        if math.isfinite(m.effective_dof) and m.effective_dof < 10:
            out.append(f"{m.name}: few effective degrees of freedom (ν_eff = "
                       f"{fmt_dof(m.effective_dof)}); k and the coverage interval depend "
                       "strongly on them.")
    if not b.monte_carlo:
        out.append("The Monte Carlo check (JCGM 101) was not run for this budget.")
    for q in b.inputs:
        out.extend(f"{q.name}: {n}" for n in q.provenance.notes)
    out.extend(str(n) for n in b.run.get("notes") or [])
    return out


def _summary(b: Budget, blocks: list[dict[str, Any]]) -> dict[str, Any]:
    """The first page: each result line, the five largest terms of each measurand (signed
    u_i(y) and share bar) and the warnings."""
    top = []
    for m, blk in zip(b.measurands, blocks):
        rows = sorted((r for g in grouped_rows(b, m) for r in g.rows), key=lambda r: -r.share)
        said = (b.run.get("outputs") or {}).get(m.name)
        sym = said.get("symbol") if isinstance(said, dict) and said.get("symbol") else m.name
        top.append({"label": blk["label"], "symbol": symbol_html(str(sym)),
                    "unit": blk["unit_sfx"].strip(),
                    "rows": [_term_row(r, m.unit) for r in rows[:5]],
                    "more": max(len(rows) - 5, 0)})
    warns = [{"severity": w.severity, "code": w.code, "input": w.input, "message": w.message}
             for w in b.warnings]
    return {"top": top, "warnings": warns}


def _label_measurands(b: Budget, blocks: list[dict[str, Any]], view: dict[str, Any]) -> None:
    """Each measurand block's ``label`` (its name in words and its symbol, as HTML) and
    ``equation`` (the typeset model line)."""
    outputs = b.run.get("outputs") or {}
    eqs = {e["output"]: e for e in view["equations"]}
    for blk in blocks:
        d = outputs.get(blk["name"]) if isinstance(outputs.get(blk["name"]), dict) else {}
        sym = symbol_html(str(d.get("symbol") or blk["name"]))
        blk["label"] = (escape(d["name"]) + Markup(" ") + sym) if d.get("name") else sym
        blk["equation"] = eqs.get(blk["name"], {"image": "", "text": ""})


def _header(rep: dict[str, str], keys: tuple[str, ...]) -> list[tuple[str, str]]:
    return [(FIELD_LABELS[k], rep.get(k, "").strip()) for k in keys]


#: the measurand and module blocks (figures drawn) of the last record rendered in this process,
#: by the record's SHA-256: the report, the certificate draft and the final certificate of one
#: record (``make demo``, ``sign``) draw its figures once. The blocks depend on the record only.
_DRAWN: dict[tuple, Any] = {}


def _digest(b: Budget) -> str:
    return hashlib.sha256(b.to_json().encode("utf-8")).hexdigest()


def _drawn(digest: str, part: tuple, make) -> Any:
    """``make()`` for this record and part, or a copy of what it gave before."""
    key = (digest, *part)
    if key not in _DRAWN:
        if any(k[0] != digest for k in _DRAWN):
            _DRAWN.clear()                     # keep one record's figures only
        _DRAWN[key] = make()
    return copy.deepcopy(_DRAWN[key])    # callers add to the blocks (labels, equations)


def build_context(b: Budget, *, certificate: bool = False, draft: bool = True,
                  figures: bool = True) -> dict[str, Any]:
    """The template context of a report (or certificate draft) of ``b``.

    Parameters
    ----------
    certificate : bool
        Also compute the certificate items and the list of those still empty. Default False.
    draft : bool
        Watermark every page DRAFT. Default True; only the signing step turns it off.
    figures : bool
        Draw the figures (the slow part). Default True; False gives the same text without them.
    """
    run = b.run
    # every known key present (the templates are strict about undefined names)
    rep = dict.fromkeys(FIELD_LABELS, "")
    rep.update({str(k): _s(v) for k, v in (run.get("report") or {}).items()})
    digest = _digest(b)
    measurands = _drawn(digest, ("measurands", figures),
                        lambda: [_measurand_block(b, m, draw=figures) for m in b.measurands])
    view = model_view(b)
    _label_measurands(b, measurands, view)
    said = {k: v.get("name") for k, v in (run.get("outputs") or {}).items()
            if isinstance(v, dict)}
    measurand_text = rep.get("measurand", "").strip() or ", ".join(
        f"{said.get(m.name) or m.name}{' (' + m.unit + ')' if m.unit not in ('', '1') else ''}"
        for m in b.measurands)
    item = ", ".join(x for x in (rep.get("item", "").strip(),
                                 rep.get("manufacturer", "").strip(),
                                 ("serial " + rep["item_serial"].strip())
                                 if rep.get("item_serial", "").strip() else "") if x)
    approver = rep.get("approver", "").strip()
    if approver and rep.get("approver_role", "").strip():
        approver += f" ({rep['approver_role'].strip()})"
    header = [("Laboratory", rep.get("laboratory", "").strip()),
              ("Report number", rep.get("report_number", "").strip()),
              ("Date(s) of measurement", rep.get("measurement_date", "").strip()),
              ("Date of issue", rep.get("issue_date", "").strip()),
              ("Measurand", measurand_text), ("Item", item),
              ("Customer", rep.get("customer", "").strip()),
              ("Measured by", rep.get("operator", "").strip()), ("Approved by", approver)]
    corr, tied = [], []
    names = list(b.correlation_names)
    if len(names) > 1:
        for i, row in enumerate(b.correlation_matrix):
            for j in range(i + 1, len(row)):
                # |r| = 1.000 to three decimals: one output is, to first order, a linear
                # function of the other (delta_I of I): a table row that tells nothing
                (tied if abs(row[j]) >= 0.9995 else corr).append(
                    (names[i], names[j], f"{row[j]:.3f}".replace("-", "−")))
    files = [{"path": _s(f.get("path")), "sha256": _s(f.get("sha256"))}
             for f in run.get("files") or [] if isinstance(f, dict)]
    settings = [
        ("spec file", _s(run.get("spec_file"))), ("spec SHA-256", _s(run.get("spec_sha256"))),
        ("software", _s(run.get("software"))), ("random seed", _s(run.get("seed"))),
        ("Monte Carlo trials (setting)", _s(run.get("trials_setting"))),
        ("Monte Carlo sampling", {"sobol": "randomized quasi-Monte Carlo (scrambled Sobol "
                                  "points; a deviation from JCGM 101)",
                                  "random": "pseudo-random (JCGM 101 §6)"}.get(
            str(run.get("sampling")), _s(run.get("sampling")))),
        ("coverage probability", f"{100 * float(run.get('coverage_probability', 0.95)):g} %"),
        ("propagation order", _s(run.get("propagation_order", 1))),
        ("rounding of ν_eff", _s(run.get("dof_rounding", "floor"))),
        ("record schema", b.schema),
    ]
    ctx: dict[str, Any] = {
        "title": b.title, "description": _s(run.get("description")), "rep": rep,
        "header": header, "measurands": measurands,
        "inputs": [_input_block(b, q) for q in b.inputs],
        "input_correlations": [(str(a), str(c), f"{float(r):.3f}".replace("-", "−"))
                               for a, c, r in run.get("input_correlations") or []],
        "measurand_correlations": corr, "modules": _drawn(digest, ("modules", figures),
                                                   lambda: _module_blocks(b, draw=figures)),
        "measurand_tied": tied,
        "cautions": _cautions(b), "files": files, "settings": settings,
        "model": [(str(k), str(v)) for k, v in (run.get("model") or {}).items()],
        "model_view": view, "summary": _summary(b, measurands),
        "constants": [(str(k), sci(fmt_num(float(v), 10)))
                      for k, v in (run.get("constants") or {}).items()],
        "software": _s(run.get("software")), "spec_sha256": _s(run.get("spec_sha256")),
        "certificate": certificate, "draft": draft,
        "doc_kind": "Calibration certificate" if certificate else "Uncertainty report",
        "doc_number": (rep.get("certificate_number", "").strip() if certificate
                       else rep.get("report_number", "").strip()),
        "nominal": sci(nominal_text(point)) if (point := nominal_point(b)) else "",
        "mc_ran": bool(b.monte_carlo),
        "mc_all_validated": bool(b.monte_carlo) and all(x.validated for x in b.monte_carlo),
        "mc_method": monte_carlo_method(b),
        "mc_any_inconclusive": any(x.verdict == "inconclusive" for x in b.monte_carlo),
    }
    if certificate:
        ctx["cert_missing"] = [(FIELD_LABELS[k], clause) for k, clause in CERTIFICATE_ITEMS
                               if not rep.get(k, "").strip()]
        ctx["cert_item"] = _header(rep, ("item", "manufacturer", "item_serial",
                                         "item_condition"))
        ctx["cert_dates"] = _header(rep, ("receipt_date", "measurement_date", "issue_date"))
        # ISO/IEC 17025:2017 §7.8.6: a statement of conformity only with its decision rule
        conformity = rep.get("conformity", "").strip()
        rule = rep.get("decision_rule", "").strip()
        ctx["conformity"] = (conformity, rule) if conformity and rule else None
        ctx["conformity_without_rule"] = bool(conformity) and not rule
        deviations = rep.get("deviations", "").strip()
        if run.get("sampling") == "sobol" and b.monte_carlo:
            auto = f"Monte Carlo check by {RQMC_DEVIATION}."
            deviations = f"{deviations} {auto}" if deviations else auto
        ctx["cert_deviations"] = deviations
        ctx["cert_mc_cautions"] = _certificate_mc_cautions(b) + _certificate_error_cautions(b)
    return ctx


def _certificate_error_cautions(b: Budget) -> list[str]:
    """Draft cautions for the record's warnings of severity 'error' (other than the Monte
    Carlo one said above): signing refuses them without --accept-warnings."""
    return [f"{w.input + ': ' if w.input else ''}{w.message} (warning {w.code} has severity "
            "'error', so signing needs --accept-warnings.)"
            for w in b.warnings if w.severity == "error" and w.code != "monte_carlo.not_stabilised"]


def _certificate_mc_cautions(b: Budget) -> list[str]:
    """Draft cautions on a stated Monte Carlo interval that did not stabilise, and on an
    inconclusive check (JCGM 101 §7.9, §8)."""
    out = []
    for mc in b.monte_carlo:
        if mc.verdict == "not_validated" and mc.adaptive and not mc.stabilised:
            out.append(f"{mc.measurand}: the Monte Carlo coverage interval stated as the result "
                       "comes from an adaptive procedure that stopped at max_trials before its "
                       "results stabilised (JCGM 101 §7.9); the record's warning "
                       "monte_carlo.not_stabilised has severity 'error', so signing needs "
                       "--accept-warnings.")
        elif mc.verdict == "inconclusive":
            out.append(f"{mc.measurand}: the Monte Carlo check (JCGM 101 §8) is inconclusive; "
                       "the certificate states the GUM result without claiming that it is "
                       "validated.")
    return out
