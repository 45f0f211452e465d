"""The comparison of runs as a small HTML page and an A4 PDF (jinja2 → HTML → WeasyPrint).

Every value from the records (titles, labels, dates, names) goes through jinja2's autoescaping,
so a title holding markup comes out as text. The PDF renderer fetches nothing but ``data:`` URIs
(the figure is an SVG embedded as one): file and network URLs are refused, so nothing from the
file system or the network can enter the PDF.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from ..compare import Comparison, NormalisedError, en_basis_text, used_k_text
from ..fmt import fmt_num, fmt_u, fmt_value
from .figures import compare_figure, svg_data_uri

__all__ = ["compare_html", "compare_pdf"]

_TEMPLATE = """<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>{{ title }}</title>
<style>
@page { size: A4; margin: 18mm 16mm 20mm 16mm;
        @bottom-right { content: "page " counter(page) " of " counter(pages);
                        font-family: "DejaVu Sans", sans-serif; font-size: 7.5pt; }
        @bottom-left { content: "{{ software }} — comparison of runs";
                       font-family: "DejaVu Sans", sans-serif; font-size: 7.5pt; } }
body { font-family: "DejaVu Sans", sans-serif; font-size: 9pt; }
h1 { font-size: 14pt; margin: 0 0 4pt 0; } h2 { font-size: 11pt; margin: 12pt 0 4pt 0; }
table { border-collapse: collapse; width: 100%; margin: 2pt 0 6pt 0; }
th, td { border-bottom: 0.5pt solid #999; padding: 2pt 4pt; text-align: left; }
td.k { white-space: nowrap; }
td.n { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
.fail { color: #a01010; font-weight: bold; } .note { color: #333; }
img { width: 100%; }
.lab { color: #3b6ea5; font-size: 8pt; letter-spacing: 0.5pt; text-transform: uppercase; }
table.head td { border-bottom: 0.3pt solid #ddd; } table.head td.k { width: 30%; color: #444; }
.sig { border: 0.6pt solid #999; padding: 4pt 8pt; margin-top: 10pt; break-inside: avoid; }
.sig td { border: none; } .line { border-bottom: 0.5pt solid #333; height: 14pt; }
</style></head><body>
<div class="lab">{{ laboratory or "Laboratory not stated" }} · comparison of runs</div>
<h1>{{ title }}</h1>
<table class="head">
<tr><td class="k">Laboratory</td><td>{{ laboratory or "not stated" }}</td></tr>
<tr><td class="k">Comparison identifier</td><td>{{ identifier or "not stated" }}</td></tr>
<tr><td class="k">Date of the comparison</td><td>{{ date or "not stated" }}</td></tr>
</table>
<p>Measurand <b>{{ c.measurand }}</b>{% if unit %} in {{ unit }}{% endif %};
{{ c.runs|length }} result{{ 's' if c.runs|length != 1 }} compared. {{ basis_sentence }}.</p>
<h2>Runs</h2>
<table><tr><th>run</th><th>title</th><th>date</th><th>record</th><th>value</th>
<th>U as stated (k)</th><th>U used {{ used_k }}</th></tr>
{% for r in runs %}<tr><td class="k">{{ r.label }}</td><td>{{ r.title }}</td><td>{{ r.date }}</td>
<td>{{ r.file }}</td><td class="n">{{ r.value }}</td><td class="n">{{ r.stated }}</td>
<td class="n">{{ r.used }}</td></tr>
{% endfor %}</table>
{% if ref %}<p>Reference: {{ ref }}</p>{% endif %}
{% if mean %}<h2>Weighted mean</h2>
<table>{% for k, v in mean %}<tr><td>{{ k }}</td><td class="n">{{ v }}</td></tr>{% endfor %}
</table>{% endif %}
<h2>Figure</h2>
<img src="{{ figure }}" alt="runs with expanded uncertainties (k = 2)">
<h2>Normalised errors {{ against }}</h2>
{{ en_table(en) }}
{% if pairwise %}<h2>Pairwise normalised errors</h2>{{ en_table(pairwise) }}{% endif %}
<h2>Terms across runs</h2>
<p>A term is the same error in several results only when declared (shared_as) or, for a
module row, systematic and from the same data file; a drift prediction at two dates carries
the correlation of its fit. Shared terms cancel from differences as far as they are
correlated.</p>
<table><tr><th>term</th><th>results</th><th>basis</th></tr>
{% for s in terms %}<tr><td>{{ s.name }}</td><td>{{ s.runs }}</td><td>{{ s.basis }}</td>
</tr>{% endfor %}</table>
{% if notes %}<h2>Notes</h2><ul>{% for n in notes %}<li class="note">{{ n }}</li>{% endfor %}
</ul>{% endif %}
<p class="note">The comparison follows from the records listed and nothing else; whether the
runs are comparable is for the laboratory to judge under its quality procedures.</p>
<div class="sig"><h2>Approval</h2><table>
<tr><td style="width:28%">Compared by</td><td><div class="line"></div></td></tr>
<tr><td>Approved by</td><td><div class="line"></div></td></tr>
<tr><td>Role</td><td><div class="line"></div></td></tr>
<tr><td>Date</td><td><div class="line"></div></td></tr>
<tr><td>Signature</td><td><div class="line"></div></td></tr>
</table></div>
</body></html>
"""

_EN_TABLE = """{% macro en_table(rows) %}<table><tr><th>result</th><th>against</th>
<th>difference</th><th>U(difference)</th><th>E_n</th><th>shared terms left out</th></tr>
{% for e in rows %}<tr><td class="k">{{ e.a }}</td><td class="k">{{ e.b }}</td><td class="n">{{ e.d }}</td>
<td class="n">{{ e.U }}</td><td class="n{{ ' fail' if e.fail }}">{{ e.en }}</td>
<td>{{ e.shared }}</td></tr>{% endfor %}</table>{% endmacro %}"""


def _env():
    import jinja2  # deferred: only the PDF and HTML outputs need it
    return jinja2.Environment(autoescape=True, undefined=jinja2.StrictUndefined)


def _en_rows(rows: Sequence[NormalisedError]) -> list[dict]:
    out = []
    for e in rows:
        out.append({"a": e.a, "b": e.b,
                    "d": fmt_value(e.difference, e.expanded_uncertainty or abs(e.difference)),
                    "U": fmt_u(e.expanded_uncertainty),
                    "en": "undefined" if e.en is None else f"{e.en:.2f}",
                    "fail": e.en is not None and abs(e.en) > 1,
                    "shared": ", ".join(e.shared) or "none"})
    return out


def compare_html(c: Comparison, *, files: Sequence[str] = (), software: str = "qcs-budget",
                 laboratory: str = "", identifier: str = "", date: str = "") -> str:
    """The comparison as a standalone HTML page (autoescaped; the figure as a data: URI).

    ``laboratory``, ``identifier`` and ``date`` fill the header (each "not stated" when
    empty); an approval block with blank lines ends the page.
    """
    files = list(files) + [""] * (len(c.runs) - len(files))
    unit = c.unit if c.unit not in ("", "1") else ""
    runs = [{"label": r.label, "title": r.title, "date": r.date, "file": f,
             "value": fmt_value(r.value, r.expanded_uncertainty),
             "stated": f"{fmt_u(r.stated_expanded_uncertainty)} ({r.stated_coverage_factor:.2f})",
             "used": fmt_u(r.expanded_uncertainty)} for r, f in zip(c.runs, files)]
    ref = ""
    if c.reference is not None:
        r = c.reference
        ref = (f"{fmt_value(r.value, r.expanded_uncertainty)} ± "
               f"{fmt_u(r.expanded_uncertainty)}{' ' + unit if unit else ''} ({used_k_text(r, c.en_basis)})"
               + (f", from the record “{r.title}”" if c.reference_kind == "record" else ""))
    mean = []
    if c.mean is not None:
        m = c.mean
        mean = [("weighted mean x̄", fmt_value(m.value, m.internal_uncertainty)),
                ("internal u(x̄) = (1ᵀV⁻¹1)^(−1/2)", fmt_u(m.internal_uncertainty)),
                ("external u(x̄) = R_B × internal", fmt_u(m.external_uncertainty)),
                ("u(x̄) to quote: the larger (common practice)",
                 fmt_u(max(m.internal_uncertainty, m.external_uncertainty))),
                ("Birge ratio R_B", fmt_num(m.birge_ratio, 3)),
                (f"χ² (ν = {m.dof})", fmt_num(m.chi2, 4)),
                ("p-value", fmt_num(m.p_value, 3))]
        if not math.isclose(m.uncertainty_with_shared, m.internal_uncertainty, rel_tol=1e-9):
            mean.append(("u(x̄) with the shared terms' covariance",
                         fmt_u(m.uncertainty_with_shared)))
    terms = [{"name": t.name, "runs": ", ".join(t.runs), "basis": t.basis} for t in c.terms]
    against = ("against the reference" if c.reference is not None
               else "against the weighted mean (each run is part of the mean)")
    env = _env()
    macro = env.from_string(_EN_TABLE).module.en_table
    tpl = env.from_string(_TEMPLATE)
    return tpl.render(title=f"Comparison of runs — {c.measurand}", c=c, unit=unit, runs=runs,
                      ref=ref, mean=mean, en=_en_rows(c.en), pairwise=_en_rows(c.pairwise),
                      en_table=macro, against=against, terms=terms, notes=list(c.notes),
                      basis_sentence=en_basis_text(c.en_basis),
                      used_k="(stated)" if c.en_basis == "stated" else "(k = 2)",
                      figure=svg_data_uri(compare_figure(c.figure, [r.label for r in c.runs],
                                                         [r.title for r in c.runs])),
                      software=software, laboratory=laboratory, identifier=identifier,
                      date=date)


def _fetcher():
    from weasyprint import URLFetcher

    class DataOnly(URLFetcher):
        """Fetches ``data:`` URIs and refuses every other URL (file, http, ...)."""

        def fetch(self, url, headers=None):
            if not url.lower().startswith("data:"):
                raise ValueError(f"refused to fetch {url[:40]!r}: only data: URIs are allowed")
            return super().fetch(url, headers)

    return DataOnly(allowed_protocols={"data"}, timeout=1)


def compare_pdf(c: Comparison, *, files: Sequence[str] = (), software: str = "qcs-budget",
                laboratory: str = "", identifier: str = "", date: str = "") -> bytes:
    """The comparison as an A4 PDF (bytes); the header fields as in :func:`compare_html`."""
    import weasyprint  # deferred: costs about a second to import
    html = compare_html(c, files=files, software=software, laboratory=laboratory,
                        identifier=identifier, date=date)
    return weasyprint.HTML(string=html, url_fetcher=_fetcher()).write_pdf()
