"""Evidence embedded in a PDF: the attachments a signed report carries, read from one revision.

Shared by :mod:`budget.signing` (which embeds them) and :mod:`budget.verify` (which reads them
from the signed revision); it sits below both so that neither imports the other.
"""

from __future__ import annotations

import io

from .errors import DataError

__all__ = ["ATTACHMENTS", "attachments_of", "open_pdf", "read_attachments"]

#: Names of the attachments sign_pdf embeds (role -> file name inside the PDF).
ATTACHMENTS = {"record": "budget-record.json", "spec": "budget-spec.toml",
               "manifest": "budget-manifest.json"}


def _name_tree_pairs(node, depth: int = 0):
    """(name, filespec) pairs of a PDF name tree (flat /Names or nested /Kids)."""
    if depth > 32:  # a name tree this deep is malformed (or a loop)
        return
    names = node.get("/Names")
    if names is not None:
        names = names.get_object()
        for i in range(0, len(names) - 1, 2):
            yield str(names[i]), names[i + 1].get_object()
    for kid in node.get("/Kids", []) or []:
        yield from _name_tree_pairs(kid.get_object(), depth + 1)


def attachments_of(root) -> dict[str, bytes]:
    """Embedded files (name -> bytes) of a PDF catalogue ``root`` (one revision's)."""
    out: dict[str, bytes] = {}
    try:
        tree = root["/Names"]["/EmbeddedFiles"]
    except KeyError:
        return out
    for name, spec in _name_tree_pairs(tree.get_object()):
        try:
            ef = spec["/EF"]
            stream = (ef.get("/UF") or ef["/F"]).get_object()
            out[name] = stream.data
        except (KeyError, AttributeError, TypeError):
            continue
    return out


def read_attachments(pdf_bytes: bytes) -> dict[str, bytes]:
    """All embedded files of a PDF's latest revision, name -> bytes."""
    reader = open_pdf(pdf_bytes)
    return attachments_of(reader.root)


def open_pdf(pdf_bytes: bytes, file: str | None = None):
    """A pyHanko reader of ``pdf_bytes``; DataError (located at ``file``) if it is not a readable,
    unencrypted PDF."""
    from pyhanko.pdf_utils.reader import PdfFileReader
    if not pdf_bytes.lstrip()[:5] == b"%PDF-":
        raise DataError("not a PDF file", file=file)
    try:
        r = PdfFileReader(io.BytesIO(pdf_bytes), strict=False)
        _ = r.root
    except Exception as exc:  # pyHanko raises several kinds on a damaged file
        raise DataError(f"cannot read the PDF ({type(exc).__name__}: {exc})",
                        file=file) from None
    if r.encrypted:
        raise DataError("encrypted PDFs are not supported", file=file)
    return r


# --------------------------------------------------------------------------- signing
