"""What was added to a signed PDF after its last signature: revisions, metadata, stray bytes.

ISO 32000-1 §7.5.6 lets anyone append an incremental update to a signed PDF without breaking the
signature's bytes; a signature covers its own revision only. pyHanko's difference analysis says
whether such updates change the page content; this module adds what it does not judge:

* **Document metadata counts as content.** The document information dictionary (title, author,
  subject, keywords ... — ISO 32000-1 §14.3.3) and the XMP metadata stream (§14.3.2) are what a
  reader's viewer shows as the document's title and what a records system files it under; a
  certificate retitled after signing is a different certificate to its reader. A later revision
  that changes either is a problem, and ``verify`` fails.
* **Everything accepted is said.** Later revisions that only fill form fields or add validation
  data are accepted (another signature, say), and bytes after the final ``%%EOF`` that belong to
  no revision are ignored by PDF readers (§7.5.5) and accepted — but each is listed, so that the
  verifier sees that the file is not byte-for-byte what was signed.
"""

from __future__ import annotations

from typing import Any

__all__ = ["after_signing"]

_WHITESPACE = b" \t\r\n\f\x00"


def _info_of(trailer) -> dict[str, str]:
    try:
        info = trailer.get("/Info")
        info = info.get_object() if info is not None else None
    except Exception:  # noqa: BLE001 - a damaged dictionary counts as "unreadable"
        return {"(unreadable)": ""}
    if info is None:
        return {}
    return {str(k): str(v) for k, v in dict(info).items()}


def _xmp_of(root) -> bytes | None:
    try:
        meta = root.get("/Metadata")
        return None if meta is None else bytes(meta.get_object().data)
    except Exception:  # noqa: BLE001
        return b"(unreadable)"


def _short(v: str | None) -> str:
    if v is None:
        return "absent"
    v = " ".join(v.split())
    return repr(v if len(v) <= 40 else v[:39] + "…")


def after_signing(reader: Any, pdf: bytes, signed_revision: int, field: str
                  ) -> tuple[list[str], list[str]]:
    """Problems and accepted additions after the revision a signature covers.

    Parameters
    ----------
    reader : pyhanko.pdf_utils.reader.PdfFileReader
        The whole file.
    pdf : bytes
        Its bytes (for data after the final ``%%EOF``).
    signed_revision : int
        0-based revision the (latest) signature covers.
    field : str
        The signature's field name, for the messages.

    Returns
    -------
    problems, accepted : list of str
        Sentences: metadata changed after signing (problems); later revisions and stray bytes
        that were accepted.
    """
    problems: list[str] = []
    accepted: list[str] = []
    total = reader.xrefs.total_revisions
    later = total - 1 - signed_revision
    if later > 0:
        signed = reader.get_historical_resolver(signed_revision)
        before, now = _info_of(signed.trailer_view), _info_of(reader.trailer_view)
        changed = sorted(k for k in set(before) | set(now) if before.get(k) != now.get(k))
        if changed:
            what = "; ".join(f"{k.lstrip('/')} {_short(before.get(k))} → {_short(now.get(k))}"
                             for k in changed[:4])
            problems.append(f"the document information was changed after signature "
                            f"'{field}' ({what}): metadata such as the title is part of what "
                            "a reader is shown, so it counts as content")
        if _xmp_of(signed.root) != _xmp_of(reader.root):
            problems.append(f"the XMP metadata was changed after signature '{field}'")
        accepted.append(f"{later} revision{'s' if later > 1 else ''} appended after signature "
                        f"'{field}' (ISO 32000-1 §7.5.6 incremental update"
                        f"{'s' if later > 1 else ''}); checked above")
    end = pdf.rfind(b"%%EOF")
    if end >= 0:
        tail = pdf[end + 5:].strip(_WHITESPACE)
        if tail:
            accepted.append(f"{len(tail)} byte{'s' if len(tail) > 1 else ''} after the final "
                            "%%EOF belong to no revision; PDF readers ignore them, so they "
                            "were ignored (the file is not byte-for-byte what was signed)")
    return problems, accepted
