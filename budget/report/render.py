"""Render a Budget as HTML (jinja2, autoescaped) and as PDF (WeasyPrint, ``data:`` URIs only).

Templates
---------
The templates and the style sheet live in the repository's top-level ``templates/`` folder
(``report.html.j2``, ``certificate.html.j2``, ``base.html.j2``, ``_macros.html.j2``,
``report.css``). A wheel carries them as ``budget/templates/`` (``setup.py`` copies the folder
into the build); a source checkout or editable install reads the top-level folder.
:func:`template_dir` says which one is used. The style sheet is inlined into the HTML: the
renderer fetches nothing.

Safety
------
* Autoescaping is on for every template: a title ``<script>…`` or a label
  ``<img src="file:///etc/passwd">`` from a spec or a record comes out as text.
* :class:`DataOnlyFetcher` refuses every URL except ``data:`` (file, http, https, ftp, relative
  names …) and ``base_url`` is None, so a PDF never contains anything from the file system or
  the network. Refused URLs are kept in ``fetcher.refused``.

Signature field (for the signing step)
--------------------------------------
The signature block is the last element of both documents and cannot break across pages, so it
is always on the **last page**. Inside it, the element ``id="signature-field"`` is a box of
:data:`SIGNATURE_FIELD_MM` (80 mm × 28 mm). :func:`render_pdf_layout` returns its page and
rectangle in PDF points (origin bottom-left, as PDF signature widgets expect), and writes the same
into the PDF's document information under the key ``/QcsSignatureBox`` as
``"page=N;rect=x0 y0 x1 y1"`` (N 1-based; points, 2 decimals), which :func:`read_signature_box`
reads back from a PDF alone.

A certificate draft (``certificate=True``) carries the DRAFT watermark on every page unless
``draft=False``; only the signing step should ask for that, right before it signs.
"""

from __future__ import annotations

import base64
import re
import urllib.parse
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path
from typing import Any

from ..errors import ComputationError
from ..result import Budget
from .context import build_context
from .text import FILTERS

__all__ = ["render_html", "render_pdf", "render_pdf_layout", "RenderedPdf", "SignatureBox",
           "DataOnlyFetcher", "read_signature_box", "SIGNATURE_FIELD_ID", "SIGNATURE_FIELD_MM",
           "SIGNATURE_INFO_KEY", "looks_signed", "template_dir"]

SIGNATURE_FIELD_ID = "signature-field"
SIGNATURE_FIELD_MM = (80.0, 28.0)            # width, height; fixed in report.css
SIGNATURE_INFO_KEY = "QcsSignatureBox"       # document-information key (letters only)
_PX_TO_PT = 0.75                             # CSS px are 1/96 in, PDF points 1/72 in


_PACKAGE_ROOT = Path(__file__).resolve().parent.parent      # .../budget


def template_dir() -> Path:
    """The folder the templates are read from: ``budget/templates`` inside an installed wheel,
    else the repository's top-level ``templates/`` (source checkout, editable install)."""
    for candidate in (_PACKAGE_ROOT / "templates", _PACKAGE_ROOT.parent / "templates"):
        if (candidate / "report.html.j2").is_file():
            return candidate
    raise ComputationError("the report templates are missing from this installation "
                           f"(looked in {_PACKAGE_ROOT / 'templates'} and "
                           f"{_PACKAGE_ROOT.parent / 'templates'})", field="templates")


@lru_cache(maxsize=1)
def _environment():
    import jinja2
    env = jinja2.Environment(loader=jinja2.FileSystemLoader(str(template_dir())),
                             autoescape=True, undefined=jinja2.StrictUndefined,
                             trim_blocks=False, lstrip_blocks=False, keep_trailing_newline=True)
    env.filters.update(FILTERS)
    return env


def render_html(budget: Budget, *, certificate: bool = False, draft: bool = True,
                figures: bool = True, signing_date: str = "") -> str:
    """The report (or, with ``certificate=True``, the certificate draft) as one HTML page.

    Parameters
    ----------
    budget : Budget
    certificate : bool
        Render the calibration-certificate draft (ISO/IEC 17025:2017 §7.8) instead of the full
        uncertainty report. Default False.
    draft : bool
        Watermark a certificate DRAFT on every page. Default True.
    figures : bool
        Draw the figures (matplotlib SVG as data URIs). Default True.
    signing_date : str
        The date the approver signs (``YYYY-MM-DD``), written into the Authorisation block's
        Date row. Default "": the row stays a blank line (drafts, unsigned reports).

    Returns
    -------
    str
        Self-contained HTML: style sheet inline, figures as ``data:`` URIs.

    Raises
    ------
    DataError
        A figure or module table in the budget's record is malformed (names the field).
    """
    ctx = build_context(budget, certificate=certificate, draft=draft, figures=figures)
    ctx["signing_date"] = signing_date
    name = "certificate.html.j2" if certificate else "report.html.j2"
    return _environment().get_template(name).render(**ctx)


# --------------------------------------------------------------------------- fetching
def _fetcher_base():
    from weasyprint.urls import URLFetcher
    return URLFetcher


def DataOnlyFetcher():  # noqa: N802 - a factory standing in for the class (lazy import)
    """A WeasyPrint URL fetcher that serves ``data:`` URIs and refuses everything else.

    Returns an instance of a :class:`weasyprint.urls.URLFetcher` subclass. ``fetch(url)``
    raises :class:`ValueError` ("refused to fetch ...") for any scheme but ``data``, and keeps
    the refused URLs in ``.refused``.
    """
    return _data_only_class()()


@lru_cache(maxsize=1)
def _data_only_class():
    from weasyprint.urls import URLFetcherResponse

    class _DataOnly(_fetcher_base()):
        def __init__(self):
            super().__init__(allowed_protocols=("data",), fail_on_errors=False)
            self.refused: list[str] = []

        def fetch(self, url, headers=None):
            scheme = url.split(":", 1)[0].lower() if ":" in url else ""
            if scheme != "data":
                self.refused.append(url)
                raise ValueError(f"refused to fetch {url!r}: a report embeds only data: URIs")
            mime, body = _decode_data_uri(url)
            return URLFetcherResponse(url, body, headers={"Content-Type": mime})

    _DataOnly.__name__ = _DataOnly.__qualname__ = "DataOnlyFetcher"
    return _DataOnly


def _decode_data_uri(url: str) -> tuple[str, bytes]:
    """``data:[<mime>][;base64],<payload>`` -> (mime, bytes) (RFC 2397)."""
    head, sep, payload = url[5:].partition(",")
    if not sep:
        raise ValueError("malformed data: URI (no comma)")
    params = head.split(";")
    mime = params[0] or "text/plain"
    if "base64" in (p.strip().lower() for p in params[1:]):
        return mime, base64.b64decode(urllib.parse.unquote(payload), validate=False)
    return mime, urllib.parse.unquote_to_bytes(payload)


# --------------------------------------------------------------------------- PDF
@dataclass(frozen=True)
class SignatureBox:
    """Where the visible signature goes.

    Attributes
    ----------
    page : int
        1-based page number (always the last page).
    pages : int
        Number of pages of the document.
    rect : tuple of float
        ``(x0, y0, x1, y1)`` in PDF points, origin at the bottom-left corner of the page.
    page_size : tuple of float
        Page width and height in points (A4: 595.28 × 841.89).
    """

    page: int
    pages: int
    rect: tuple[float, float, float, float]
    page_size: tuple[float, float]

    def to_info(self) -> str:
        x0, y0, x1, y1 = self.rect
        return f"page={self.page};rect={x0:.2f} {y0:.2f} {x1:.2f} {y1:.2f}"

    def to_dict(self) -> dict[str, Any]:
        return {"page": self.page, "pages": self.pages, "rect": list(self.rect),
                "page_size": list(self.page_size)}


@dataclass(frozen=True)
class RenderedPdf:
    """A rendered PDF with its layout facts."""

    pdf: bytes
    pages: int
    signature: SignatureBox | None
    refused: tuple[str, ...] = ()


def _find_box(page, element_id: str):
    """The block box of the element with ``id=element_id`` on a laid-out page, or None.

    Descendants come parent first, so the first match is the element's own block, not one of
    the line boxes inside it (those carry the same element).
    """
    from weasyprint.formatting_structure.boxes import BlockBox
    for box in page._page_box.descendants():
        el = getattr(box, "element", None)
        if isinstance(box, BlockBox) and el is not None and el.get("id") == element_id:
            return box
    return None


DOCUMENT_INFO_KEY = "QcsDocument"             # "report", "certificate-draft" or "certificate"
RECORD_INFO_KEY = "QcsRecordSha256"           # SHA-256 of the result record the PDF shows


def document_info(budget: Budget, *, certificate: bool, draft: bool = True) -> dict[str, str]:
    """Document-information entries that tie a PDF to the record it was rendered from.

    ``budget sign`` uses them: a certificate draft is signed by rendering the final certificate
    (no DRAFT watermark) from the same record, after checking that the record's digest is the
    one the reviewed draft carries.
    """
    import hashlib
    kind = "report" if not certificate else ("certificate-draft" if draft else "certificate")
    return {DOCUMENT_INFO_KEY: kind,
            RECORD_INFO_KEY: hashlib.sha256(budget.to_json().encode("utf-8")).hexdigest()}


def read_document_info(pdf: bytes) -> dict[str, str]:
    """The entries of :func:`document_info` found in a PDF (empty when absent)."""
    import io

    from pyhanko.pdf_utils.reader import PdfFileReader
    reader = PdfFileReader(io.BytesIO(pdf), strict=False)
    info = reader.trailer_view.get("/Info")
    if info is None:
        return {}
    info = info.get_object()
    return {k: str(info["/" + k]) for k in (DOCUMENT_INFO_KEY, RECORD_INFO_KEY)
            if "/" + k in info}


def final_from_draft(pdf: bytes, budget: Budget, *, record_file: str | None = None,
                     signing_date: str = "") -> tuple[bytes, bool]:
    """The PDF to sign: a certificate *draft* becomes the final certificate rendered again from
    the same record; anything else is returned unchanged.

    The draft carries the SHA-256 of the record it shows (:func:`document_info`); ``budget``
    must have that digest, so the approver signs exactly the numbers they reviewed, and the DRAFT
    watermark disappears only in the signed file. ``signing_date`` (``YYYY-MM-DD``) fills the
    Authorisation block's Date row of the final certificate.

    Returns
    -------
    pdf : bytes
    final : bool
        True when a draft was replaced by the final certificate.

    Raises
    ------
    DataError
        When ``budget`` is not the record the draft was rendered from.
    """
    import hashlib

    from ..errors import DataError
    info = read_document_info(pdf)
    if info.get(DOCUMENT_INFO_KEY) != "certificate-draft":
        return pdf, False
    digest = hashlib.sha256(budget.to_json().encode("utf-8")).hexdigest()
    if digest != info.get(RECORD_INFO_KEY):
        raise DataError("this record is not the one the certificate draft was rendered from "
                        "(its SHA-256 differs from the draft's)", file=record_file,
                        field="record")
    rendered = render_pdf_layout(render_html(budget, certificate=True, draft=False,
                                             signing_date=signing_date),
                                 info=document_info(budget, certificate=True, draft=False))
    return rendered.pdf, True


def render_pdf_layout(html: str, *, fetcher=None, info: dict[str, str] | None = None,
                      evidence: dict[str, bytes] | None = None) -> RenderedPdf:
    """Lay out ``html`` on A4 pages and write the PDF; locate the signature field.

    Parameters
    ----------
    html : str
        From :func:`render_html`.
    fetcher : optional
        A URL fetcher; default a fresh :func:`DataOnlyFetcher`.
    info : dict, optional
        Extra document-information entries (see :func:`document_info`).
    evidence : dict, optional
        Role (``"record"``, ``"spec"``; :data:`budget.pdf_evidence.ATTACHMENTS`) -> the bytes
        to embed as a PDF attachment under that role's file name, so that ``budget sign``
        needs nothing but the document. Default none.
    """
    import io

    import weasyprint

    from ..pdf_evidence import ATTACHMENTS
    fetcher = fetcher if fetcher is not None else DataOnlyFetcher()
    doc = weasyprint.HTML(string=html, base_url=None, url_fetcher=fetcher).render()
    sig = None
    n = len(doc.pages)
    for i, page in enumerate(doc.pages):
        box = _find_box(page, SIGNATURE_FIELD_ID)
        if box is None:
            continue
        w_pt, h_pt = page.width * _PX_TO_PT, page.height * _PX_TO_PT
        x0 = box.border_box_x() * _PX_TO_PT
        top = box.border_box_y() * _PX_TO_PT
        x1 = x0 + box.border_width() * _PX_TO_PT
        bottom = top + box.border_height() * _PX_TO_PT
        sig = SignatureBox(page=i + 1, pages=n,
                           rect=(round(x0, 2), round(h_pt - bottom, 2), round(x1, 2),
                                 round(h_pt - top, 2)),
                           page_size=(round(w_pt, 2), round(h_pt, 2)))
    if sig is not None:
        if sig.page != n:   # the template keeps the block last and unbreakable; say so if not
            raise ComputationError(f"the signature field landed on page {sig.page} of {n}, "
                                   "not on the last page", field="signature-block")
        doc.metadata.custom[SIGNATURE_INFO_KEY] = sig.to_info()
    doc.metadata.custom.update(info or {})
    what = {"record": "result record (JSON) the document was rendered from",
            "spec": "budget spec (TOML) the record was computed from"}
    attachments = [weasyprint.Attachment(file_obj=io.BytesIO(data), name=ATTACHMENTS[role],
                                         description=what.get(role, role))
                   for role, data in (evidence or {}).items()]
    pdf = doc.write_pdf(custom_metadata=True, attachments=attachments or None)
    return RenderedPdf(pdf=pdf, pages=n, signature=sig,
                       refused=tuple(getattr(fetcher, "refused", ())))


def render_pdf(html: str) -> bytes:
    """The PDF bytes of ``html`` (see :func:`render_pdf_layout` for the layout facts)."""
    return render_pdf_layout(html).pdf


_INFO = re.compile(r"page=(\d+);rect=([-\d.]+) ([-\d.]+) ([-\d.]+) ([-\d.]+)")


def read_signature_box(pdf: bytes) -> SignatureBox | None:
    """The signature field recorded in a PDF's document information, or None.

    Uses pyHanko's reader (a dependency of the signing step).
    """
    import io

    from pyhanko.pdf_utils.reader import PdfFileReader
    reader = PdfFileReader(io.BytesIO(pdf), strict=False)
    info = reader.trailer_view.get("/Info")
    raw = None if info is None else info.get_object().get("/" + SIGNATURE_INFO_KEY)
    m = _INFO.fullmatch(str(raw)) if raw is not None else None
    if m is None:
        return None
    pages = int(reader.root["/Pages"]["/Count"])
    page = int(m.group(1))
    mediabox = reader.root["/Pages"]["/Kids"][page - 1].get_object().get("/MediaBox")
    size = (float(mediabox[2]), float(mediabox[3])) if mediabox is not None else (595.28, 841.89)
    return SignatureBox(page=page, pages=pages,
                        rect=tuple(float(m.group(i)) for i in range(2, 6)), page_size=size)


def looks_signed(pdf: bytes) -> bool:
    """True when a PDF carries a signature dictionary (``/ByteRange`` is in every one)."""
    return b"/ByteRange" in pdf
