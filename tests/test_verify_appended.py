"""What ``verify`` does with bytes and revisions appended after signing (issue 17, class 7).

The decision (README "Commands and exit codes"): the document information dictionary and the XMP
metadata count as content — a viewer shows the title (ISO 32000-1 §14.3.3 "Document Information
Dictionary"), so a retitled certificate is a different certificate to its reader — and a later
revision that changes them fails verification. Bytes after the final ``%%EOF`` belong to no
revision (ISO 32000-1 §7.5.5 "File Trailer": a reader starts from the last ``startxref``) and
are accepted; every accepted addition is listed in the output.
"""

from __future__ import annotations

import io

import pytest
from evidence_helpers import PASSPHRASE, make_pdf, write_spec_folder

from budget import cli, signing
from budget.engine import evaluate
from budget.spec import load_spec


@pytest.fixture(scope="module")
def signed(tmp_path_factory):
    root = tmp_path_factory.mktemp("appended")
    spec = write_spec_folder(root / "lab")
    record = evaluate(load_spec(spec)).to_json()
    ident = signing.create_identity("Ada Quill (invented)", "", root / "id", PASSPHRASE)
    data = signing.sign_pdf(make_pdf(), ident.p12_path, PASSPHRASE, reason="approved",
                            location="Invented Lab", record_json=record,
                            spec_text=spec.read_bytes())
    return root, data, ident.pem_path


def _verify(pdf: bytes, root, pem, capsys, name="x.pdf"):
    p = root / name
    p.write_bytes(pdf)
    code = cli.main(["verify", str(p), "--trust", str(pem)])
    out, err = capsys.readouterr()
    return code, out, err


def test_untouched_file_lists_nothing_accepted(signed, capsys):
    root, data, pem = signed
    code, out, _ = _verify(data, root, pem, capsys)
    assert code == 0 and "accepted after signing" not in out


def test_bytes_after_eof_are_accepted_and_reported(signed, capsys):
    root, data, pem = signed
    junk = b"\n% appended by someone\nnot a PDF object at all\n"
    code, out, _ = _verify(data + junk, root, pem, capsys, "junk.pdf")
    assert code == 0, out
    n = len(junk.strip())
    assert f"accepted after signing: {n} bytes after the final %%EOF" in out


def test_title_changed_after_signing_fails(signed, capsys):
    from pyhanko.pdf_utils import generic
    from pyhanko.pdf_utils.incremental_writer import IncrementalPdfFileWriter
    root, data, pem = signed
    w = IncrementalPdfFileWriter(io.BytesIO(data))
    info = generic.DictionaryObject({generic.NameObject("/Title"):
                                     generic.TextStringObject("Certificate of another item")})
    w.set_info(info)
    buf = io.BytesIO()
    w.write(buf)
    assert buf.getvalue().startswith(data)  # an incremental update (ISO 32000-1 §7.5.6)
    code, out, _ = _verify(buf.getvalue(), root, pem, capsys, "retitled.pdf")
    assert code == 1, out
    assert "document information was changed" in out and "Certificate of another item" in out
    assert "accepted after signing: 1 revision appended" in out
