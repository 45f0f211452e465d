"""The logbook's trend page: HTML (jinja2, autoescaped) and an A4 PDF through the report's own
renderer (:func:`budget.report.render.render_pdf`, which fetches nothing but ``data:`` URIs).

The page holds the figure (:func:`budget.report.figures.trend_figure`), each chain's weighted
mean with the generalised χ², the step tests at recalibrations, the flags (each naming the
chain, the dates, E_n and the calibration) and the table of runs — the same content as
``budget logbook trend --json``.
"""

from __future__ import annotations

from ..fmt import fmt_num, fmt_u, fmt_value
from ..logbook.trend import EN_BASIS_TEXT
from .figures import svg_data_uri, trend_figure
from .render import render_pdf

__all__ = ["trend_html", "trend_pdf"]

_TEMPLATE = """<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>{{ title }}</title>
<style>
@page { size: A4; margin: 16mm 14mm 18mm 14mm;
        @bottom-right { content: "page " counter(page) " of " counter(pages);
                        font-family: "DejaVu Sans", sans-serif; font-size: 7.5pt; }
        @bottom-left { content: "{{ software }} — logbook trend";
                       font-family: "DejaVu Sans", sans-serif; font-size: 7.5pt; } }
body { font-family: "DejaVu Sans", sans-serif; font-size: 8.5pt; }
h1 { font-size: 13pt; margin: 0 0 3pt 0; } h2 { font-size: 10.5pt; margin: 9pt 0 3pt 0; }
table { border-collapse: collapse; width: 100%; margin: 2pt 0 5pt 0; }
th, td { border-bottom: 0.5pt solid #999; padding: 1.5pt 3pt; text-align: left;
         vertical-align: top; }
td.n { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
.flag { color: #a01010; } .small { font-size: 7.5pt; } .caution { color: #a01010; }
tr { break-inside: avoid; page-break-inside: avoid; }
table.steps { table-layout: fixed; } table.steps td { overflow-wrap: anywhere; }
img { width: 100%; }
</style></head><body>
<h1>{{ title }}</h1>
<p>{{ t.points|length }} runs from {{ first }} to {{ last }} in {{ book }}. Each point is a
run's result with its expanded uncertainty U as stated. {{ en_basis }}; |E_n| &gt; 1 is
flagged.</p>
<img src="{{ figure }}" alt="trend of {{ t.measurand }} against measurement date">
<h2>Flags ({{ t.flags|length }})</h2>
{% if flags %}<table><tr><th>kind</th><th>chain</th><th>dates</th><th>E_n</th>
<th>what and which calibration</th></tr>
{% for f in flags %}<tr class="flag"><td>{{ f.kind }}</td><td>{{ f.chain }}</td>
<td class="small">{{ f.dates }}</td><td class="n">{{ f.en }}</td>
<td class="small">{{ f.message }}</td></tr>{% endfor %}</table>
{% else %}<p>None.</p>{% endif %}
{% if t.false_alarms %}<p class="small">False alarms: {{ t.false_alarms.text }}.</p>{% endif %}
<h2>Weighted mean per chain (generalised least squares, shared terms as covariance)</h2>
<table><tr><th>chain</th><th>runs</th><th>weighted mean</th><th>u</th><th>χ²</th><th>ν</th>
<th>p</th><th>Birge ratio</th></tr>
{% for c in chains %}<tr><td>{{ c.chain }}</td>{% for v in c.cells %}<td class="n">{{ v }}</td>
{% endfor %}</tr>{% endfor %}</table>
{% for c in chains %}{% if c.caution %}<p class="small caution">Caution, {{ c.chain }}: {{ c.caution }}</p>{% endif %}{% endfor %}
<h2>Step tests at recalibrations</h2>
{% if steps %}<p class="small">Before and after: weighted mean ± u (runs).</p>
<table class="steps small"><colgroup><col style="width: 11%"><col style="width: 12%">
<col style="width: 20%"><col style="width: 13%"><col style="width: 13%"><col style="width: 13%">
<col style="width: 6%"><col style="width: 12%"></colgroup>
<tr><th>chain</th><th>recalibrated between</th><th>calibration changed</th>
<th>before</th><th>after</th><th>after − before ± U (k = 2)</th><th>E_n</th>
<th>other chains' E_n</th></tr>
{% for s in steps %}<tr{% if s.flagged %} class="flag"{% endif %}><td>{{ s.chain }}</td>
<td>{{ s.between }}</td><td>{{ s.label }}</td>
{% if s.tested %}<td>{{ s.before }}</td><td>{{ s.after }}</td><td>{{ s.diff }}</td>
<td class="n">{{ s.en }}</td><td>{{ s.other }}</td>
{% else %}<td colspan="5">{{ s.note }}</td>{% endif %}</tr>{% endfor %}</table>
{% else %}<p>None: no calibration changed between two runs of one chain.</p>{% endif %}
<h2>Runs</h2>
<table class="small"><tr><th>#</th><th>measured</th><th>chain</th><th>title</th>
<th>value</th><th>U (k)</th><th>E_n vs other chain</th></tr>
{% for p in points %}<tr{% if p.flagged %} class="flag"{% endif %}><td>{{ p.id }}</td>
<td>{{ p.date }}</td><td>{{ p.chain }}</td><td>{{ p.title }}</td><td class="n">{{ p.value }}</td>
<td class="n">{{ p.U }}</td><td class="n">{{ p.en }}</td></tr>{% endfor %}</table>
{% if t.notes %}<h2>Notes</h2><ul>{% for n in t.notes %}<li>{{ n }}</li>{% endfor %}</ul>{% endif %}
</body></html>
"""


def _opt(x, digits: str = ".2f") -> str:
    return "–" if x is None else format(x, digits)


def trend_html(t, *, book: str = "", software: str = "qcs-budget") -> str:
    """The trend page as standalone HTML (the figure as a data: URI)."""
    import jinja2  # deferred: only the page outputs need it
    unit = f" {t.unit}" if t.unit not in ("", "1") else ""
    chains = [{"chain": c.chain, "caution": c.caution, "cells": [
        str(c.mean.n), fmt_value(c.mean.value, c.mean.standard_uncertainty) + unit,
        fmt_u(c.mean.standard_uncertainty), "–" if c.mean.dof == 0 else fmt_num(c.mean.chi2, 3),
        str(c.mean.dof), "–" if c.mean.p_value is None else fmt_num(c.mean.p_value, 2),
        "–" if c.mean.birge_ratio is None else fmt_num(c.mean.birge_ratio, 3)]}
        for c in t.chains]
    steps = []
    for s in t.steps:
        r = s.recalibration
        tested = s.en is not None
        steps.append({
            "chain": r.chain, "between": f"{r.date_from[:10]} and {r.date_to[:10]}",
            "label": r.label(), "flagged": s.flagged,
            "tested": tested, "note": s.note,
            "before": (f"{fmt_value(s.before.value, s.before.standard_uncertainty)} ± "
                       f"{fmt_u(s.before.standard_uncertainty)} ({s.before.n})"
                       ) if tested else "–",
            "after": (f"{fmt_value(s.after.value, s.after.standard_uncertainty)} ± "
                      f"{fmt_u(s.after.standard_uncertainty)} ({s.after.n})"
                      ) if tested else "–",
            "diff": (f"{fmt_value(s.difference, 2 * s.standard_uncertainty)} ± "
                     f"{fmt_u(2 * s.standard_uncertainty)}") if tested else s.note,
            "en": _opt(s.en),
            "other": ("; ".join(f"{o['chain']}: {_opt(o['en'])}" for o in s.others)
                      if len(s.others) > 1 else _opt(s.other_en))})
    en_of = {c["id"]: c["en"] for c in t.run_checks}
    flagged = {r for f in t.flags if f.kind == "run-vs-other-chain" for r in f.runs}
    points = [{"id": p.id, "date": p.date_start.replace("T", " "), "chain": p.chain,
               "title": p.title, "value": fmt_value(p.value, p.expanded_uncertainty),
               "U": f"{fmt_u(p.expanded_uncertainty)} ({p.coverage_factor:.2f})",
               "en": _opt(en_of.get(p.id)), "flagged": p.id in flagged} for p in t.points]
    flags = [{"kind": f.kind.replace("-", " "), "chain": f.chain,
              "dates": (f.date_from[:10] if f.date_from[:10] == f.date_to[:10] else
                        f"{f.date_from[:10]} to {f.date_to[:10]}"),
              "en": _opt(f.value), "message": f.message} for f in t.flags]
    dates = sorted(p.date_start for p in t.points)
    env = jinja2.Environment(autoescape=True, undefined=jinja2.StrictUndefined)
    return env.from_string(_TEMPLATE).render(
        title=f"Logbook trend — {t.measurand}", t=t, book=book or "the logbook",
        first=dates[0][:10], last=dates[-1][:10], figure=svg_data_uri(trend_figure(t)),
        chains=chains, steps=steps, points=points, flags=flags, software=software,
        en_basis=EN_BASIS_TEXT.replace("`", "").replace("(en_stated_U)", "(in its flag)"))


def trend_pdf(t, *, book: str = "", software: str = "qcs-budget") -> bytes:
    """The trend page as an A4 PDF (bytes)."""
    return render_pdf(trend_html(t, book=book, software=software))
