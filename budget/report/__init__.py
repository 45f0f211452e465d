"""The report and the certificate draft: HTML (jinja2) and PDF (WeasyPrint) from a Budget.

::

    from budget.report import render_html, render_pdf
    html = render_html(budget)                       # or certificate=True
    pdf = render_pdf(html)

Templates: the top-level ``templates/`` folder (``budget/templates/`` in a wheel). Figures: :mod:`budget.report.figures`. Signature field for the
signing step: :func:`render_pdf_layout` and :func:`read_signature_box` (see
:mod:`budget.report.render`). Heavy imports (matplotlib, WeasyPrint) happen on first use only.
"""

from .render import (
    SIGNATURE_FIELD_ID,
    SIGNATURE_FIELD_MM,
    SIGNATURE_INFO_KEY,
    DataOnlyFetcher,
    RenderedPdf,
    SignatureBox,
    document_info,
    final_from_draft,
    looks_signed,
    read_document_info,
    read_signature_box,
    render_html,
    render_pdf,
    render_pdf_layout,
)

__all__ = ["render_html", "render_pdf", "render_pdf_layout", "RenderedPdf", "SignatureBox",
           "DataOnlyFetcher", "read_signature_box", "looks_signed", "document_info", "final_from_draft",
           "read_document_info", "SIGNATURE_FIELD_ID", "SIGNATURE_FIELD_MM",
           "SIGNATURE_INFO_KEY"]
