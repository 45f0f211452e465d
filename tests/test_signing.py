"""Signing identities, signed reports and their verification (issue 6, items 1-4).

External references for the checks:

* PAdES baseline signatures (ETSI EN 319 142-1) use the signature dictionary's SubFilter
  ``/ETSI.CAdES.detached`` and a ``/ByteRange`` that covers the whole file except the signature
  value (ISO 32000-1 §12.8.1) — (memory). The signed PDFs are read back with pypdf, a general
  PDF library independent of pyHanko, which did the signing.
* Certificates are read back with ``cryptography`` (X.509 per RFC 5280): common name and title
  attributes, key usage digitalSignature + nonRepudiation (RFC 5280 §4.2.1.3).
* The tampering cases are the ones the issue names: one flipped byte in the signed range, an
  appended incremental revision that changes content (ISO 32000-1 §7.5.6 incremental updates),
  and a certificate the verifier does not trust.
"""

from __future__ import annotations

import hashlib
import io
import json
import shutil

import pypdf
import pytest
from cryptography import x509
from cryptography.hazmat.primitives.serialization import Encoding, pkcs12
from cryptography.x509.oid import NameOID
from evidence_helpers import PASSPHRASE, make_pdf, write_spec_folder

from budget import cli, signing
from budget.engine import evaluate
from budget.errors import UsageError
from budget.spec import load_spec


@pytest.fixture(scope="module")
def setup(tmp_path_factory):
    root = tmp_path_factory.mktemp("signing")
    spec_path = write_spec_folder(root / "lab")
    record = evaluate(load_spec(spec_path)).to_json()
    (root / "record.json").write_text(record, encoding="utf-8")
    a = signing.create_identity("Ada Quill", "Head of laboratory", root / "ada", PASSPHRASE)
    b = signing.create_identity("Bo Outsider", "", root / "bo", PASSPHRASE + "-b")
    (root / "report.pdf").write_bytes(make_pdf())
    return {"root": root, "spec": spec_path, "record": root / "record.json", "a": a, "b": b}


def _run(argv, capsys, monkeypatch, passphrase=PASSPHRASE):
    monkeypatch.setenv("BUDGET_PASSPHRASE", passphrase)
    code = cli.main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def _sign(setup, capsys, monkeypatch, out_name="signed.pdf", **kw):
    s = setup
    out = s["root"] / out_name
    argv = ["sign", kw.get("report", s["root"] / "report.pdf"), "--identity",
            kw.get("identity", s["a"].p12_path), "-o", out, "--spec", s["spec"],
            "--record", s["record"], "--reason", "approved", "--location", "Invented Lab",
            *kw.get("extra", [])]
    code, o, e = _run(argv, capsys, monkeypatch, kw.get("passphrase", PASSPHRASE))
    return code, out, o, e


@pytest.fixture(scope="module")
def signed(setup):
    s = setup
    data = signing.sign_pdf((s["root"] / "report.pdf").read_bytes(), s["a"].p12_path,
                            PASSPHRASE, reason="approved", location="Invented Lab",
                            record_json=s["record"].read_text("utf-8"),
                            spec_text=s["spec"].read_bytes())
    p = s["root"] / "signed-fixture.pdf"
    p.write_bytes(data)
    return p


def _verify(setup, path, capsys, monkeypatch, trust=None, extra=()):
    trust = trust or [setup["a"].pem_path]
    argv = ["verify", path] + [x for t in trust for x in ("--trust", t)] + list(extra)
    return _run(argv, capsys, monkeypatch)


# --------------------------------------------------------------------------- identities
def test_identity_certificate_names_signer_and_role(setup):
    a = setup["a"]
    cert = x509.load_pem_x509_certificate(open(a.pem_path, "rb").read())
    assert cert.subject.get_attributes_for_oid(NameOID.COMMON_NAME)[0].value == "Ada Quill"
    assert cert.subject.get_attributes_for_oid(NameOID.TITLE)[0].value == "Head of laboratory"
    ku = cert.extensions.get_extension_for_class(x509.KeyUsage).value
    assert ku.digital_signature and ku.content_commitment  # RFC 5280 §4.2.1.3
    # the PKCS#12 file opens with the passphrase and with nothing else
    raw = open(a.p12_path, "rb").read()
    key, c, _ = pkcs12.load_key_and_certificates(raw, PASSPHRASE.encode())
    assert key is not None and c == cert
    with pytest.raises(ValueError):
        pkcs12.load_key_and_certificates(raw, b"not the passphrase")
    assert PASSPHRASE.encode() not in raw
    assert hashlib.sha256(cert.public_bytes(Encoding.DER)).hexdigest() == a.fingerprint


def test_identity_create_cli_refuses_overwrite(setup, capsys, monkeypatch, tmp_path):
    code, out, err = _run(["identity", "create", "--name", "Cy Test", "--out", tmp_path / "id"],
                          capsys, monkeypatch)
    assert code == 0 and (tmp_path / "id" / "identity.p12").is_file()
    before = (tmp_path / "id" / "identity.p12").read_bytes()
    code, out, err = _run(["identity", "create", "--name", "Cy Test", "--out", tmp_path / "id"],
                          capsys, monkeypatch)
    assert code == 2 and len(err.strip().splitlines()) == 1 and "--force" in err
    assert (tmp_path / "id" / "identity.p12").read_bytes() == before
    assert PASSPHRASE not in out + err


def test_short_passphrase_refused(tmp_path):
    with pytest.raises(UsageError, match="at least 8"):
        signing.create_identity("Cy Test", "", tmp_path / "x", "short")


# --------------------------------------------------------------------------- sign -> verify
def test_sign_then_verify_passes(setup, capsys, monkeypatch):
    code, out, o, e = _sign(setup, capsys, monkeypatch)
    assert code == 0, e
    code, o, e = _verify(setup, out, capsys, monkeypatch)
    assert code == 0, o + e
    assert "Ada Quill (Head of laboratory)" in o and "verified" in o


def test_signed_pdf_read_back_with_pypdf(setup, signed):
    """An independent PDF reader finds a PAdES signature field and the embedded evidence."""
    data = signed.read_bytes()
    r = pypdf.PdfReader(io.BytesIO(data))
    att = r.attachments
    assert att["budget-record.json"][0] == setup["record"].read_bytes()
    assert att["budget-spec.toml"][0] == setup["spec"].read_bytes()
    manifest = json.loads(att["budget-manifest.json"][0])
    cal = (setup["spec"].parent / "data" / "cal.csv").read_bytes()
    assert manifest["files"] == [{"path": "data/cal.csv",
                                  "sha256": hashlib.sha256(cal).hexdigest()}]
    assert manifest["spec"]["sha256"] == hashlib.sha256(setup["spec"].read_bytes()).hexdigest()
    fields = [f for f in r.trailer["/Root"]["/AcroForm"]["/Fields"]]
    sig = fields[0].get_object()
    assert sig["/FT"] == "/Sig"
    v = sig["/V"].get_object()
    assert v["/SubFilter"] == "/ETSI.CAdES.detached"  # PAdES baseline (ETSI EN 319 142-1)
    a, b, c, d = [int(x) for x in v["/ByteRange"]]
    assert a == 0 and c + d == len(data)  # the signed ranges reach the end of the file
    # visible block: on the last page, in the default box at the lower right (SIGNATURE_BOX)
    last = r.pages[-1]
    widget = [x.get_object() for x in last["/Annots"]][0]
    right, bottom, width, height = signing.SIGNATURE_BOX
    assert [round(float(x)) for x in widget["/Rect"]] == [
        round(595.28 - right) - width, bottom, round(595.28 - right), bottom + height]
    ap = widget["/AP"]["/N"].get_object().get_data()
    # pyHanko escapes ":" as \072 in PDF strings (ISO 32000-1 §7.3.4.2 octal escapes)
    assert b"(Signed by Ada Quill)" in ap and b"(Head of laboratory)" in ap and b"(Date" in ap
    assert PASSPHRASE.encode() not in data


def test_visible_block_goes_where_the_report_put_its_field(setup, tmp_path):
    """budget.report.render records the field as /QcsSignatureBox 'page=N;rect=x0 y0 x1 y1'."""
    pdf = make_pdf(pages=2, info={"QcsSignatureBox": "page=2;rect=197.10 214.26 423.87 293.63"})
    s = setup
    data = signing.sign_pdf(pdf, s["a"].p12_path, PASSPHRASE,
                            record_json=s["record"].read_text("utf-8"),
                            spec_text=s["spec"].read_bytes())
    r = pypdf.PdfReader(io.BytesIO(data))
    assert "/Annots" not in r.pages[0]
    widget = r.pages[1]["/Annots"][0].get_object()
    # rounded outwards to whole points: floor(197.10), floor(214.26), ceil(423.87), ceil(293.63)
    assert [float(x) for x in widget["/Rect"]] == [197, 214, 424, 294]


# --------------------------------------------------------------------------- tampering
def test_flipped_byte_in_signed_range_fails(setup, signed, capsys, monkeypatch, tmp_path):
    data = bytearray(signed.read_bytes())
    i = data.index(b"Calibration report (invented)")
    r = pypdf.PdfReader(io.BytesIO(bytes(data)))
    br = [int(x) for x in r.trailer["/Root"]["/AcroForm"]["/Fields"][0].get_object()["/V"]
          .get_object()["/ByteRange"]]
    assert i + 12 < br[1]  # inside the first signed range
    data[i + 12] ^= 0x20   # 'r' -> 'R' of "report": same length, still a valid PDF
    bad = tmp_path / "flipped.pdf"
    bad.write_bytes(bytes(data))
    code, o, e = _verify(setup, bad, capsys, monkeypatch)
    assert code == 1 and "FAILED" in o and "changed" in o


def test_appended_revision_changing_content_fails(setup, signed, capsys, monkeypatch,
                                                  tmp_path):
    from pyhanko.pdf_utils import generic
    from pyhanko.pdf_utils.incremental_writer import IncrementalPdfFileWriter

    w = IncrementalPdfFileWriter(io.BytesIO(signed.read_bytes()))
    stream = generic.StreamObject(stream_data=b"BT /F1 30 Tf 72 500 Td (V = 0.2 V) Tj ET")
    w.add_stream_to_page(0, w.add_object(stream))
    out = io.BytesIO()
    w.write(out)
    bad = tmp_path / "appended.pdf"
    bad.write_bytes(out.getvalue())
    assert out.getvalue().startswith(signed.read_bytes())  # an incremental update, appended
    code, o, e = _verify(setup, bad, capsys, monkeypatch)
    assert code == 1 and "changed after signing" in o


def test_appended_annotation_fails(setup, signed, capsys, monkeypatch, tmp_path):
    from pyhanko.pdf_utils import generic
    from pyhanko.pdf_utils.incremental_writer import IncrementalPdfFileWriter

    w = IncrementalPdfFileWriter(io.BytesIO(signed.read_bytes()))
    page_ref, _ = w.find_page_for_modification(0)
    page = page_ref.get_object()
    n = generic.pdf_name
    annot = generic.DictionaryObject({
        n("/Type"): n("/Annot"), n("/Subtype"): n("/FreeText"),
        n("/Rect"): generic.ArrayObject([generic.NumberObject(v) for v in (72, 600, 300, 640)]),
        n("/Contents"): generic.TextStringObject("U = 0 (edited)"),
        n("/DA"): generic.TextStringObject("/Helv 12 Tf 0 g")})
    annots = page.get("/Annots")
    arr = generic.ArrayObject(list(annots.get_object()) if annots is not None else [])
    arr.append(w.add_object(annot))
    page[n("/Annots")] = arr
    w.update_container(page)
    out = io.BytesIO()
    w.write(out)
    bad = tmp_path / "annotated.pdf"
    bad.write_bytes(out.getvalue())
    code, o, e = _verify(setup, bad, capsys, monkeypatch)
    assert code == 1 and "changed after signing" in o


def test_untrusted_certificate_fails(setup, signed, capsys, monkeypatch):
    code, o, e = _verify(setup, signed, capsys, monkeypatch, trust=[setup["b"].pem_path])
    assert code == 1 and "not trusted" in o


def test_cosignature_keeps_first_signature_valid(setup, signed, capsys, monkeypatch):
    """A second signature is form filling for the first one: both verify."""
    code, out, o, e = _sign(setup, capsys, monkeypatch, out_name="cosigned.pdf",
                            report=signed, identity=setup["b"].p12_path,
                            passphrase=PASSPHRASE + "-b")
    assert code == 0, e
    code, o, e = _verify(setup, out, capsys, monkeypatch,
                         trust=[setup["a"].pem_path, setup["b"].pem_path])
    assert code == 0, o
    assert "changes after signing: form filling" in o
    # trusting only the first signer is not enough
    code, o, e = _verify(setup, out, capsys, monkeypatch)
    assert code == 1 and "Bo Outsider" in o


# --------------------------------------------------------------------------- bad input
def test_wrong_passphrase_exit_2_one_line(setup, capsys, monkeypatch):
    code, out, o, e = _sign(setup, capsys, monkeypatch, out_name="never.pdf",
                            passphrase="wrong passphrase")
    assert code == 2
    assert e.strip().count("\n") == 0 and "wrong passphrase" in e
    assert "Traceback" not in e and "wrong passphrase for" in e
    assert not out.exists()


def test_existing_signed_pdf_not_overwritten(setup, signed, capsys, monkeypatch, tmp_path):
    target = tmp_path / "exists.pdf"
    shutil.copyfile(signed, target)
    before = target.read_bytes()
    code, o, e = _run(["sign", setup["root"] / "report.pdf", "--identity", setup["a"].p12_path,
                       "-o", target, "--spec", setup["spec"], "--record", setup["record"]],
                      capsys, monkeypatch)
    assert code == 2 and "--force" in e and target.read_bytes() == before
    code, o, e = _run(["sign", setup["root"] / "report.pdf", "--identity", setup["a"].p12_path,
                       "-o", target, "--spec", setup["spec"], "--record", setup["record"],
                       "--force"], capsys, monkeypatch)
    assert code == 0 and target.read_bytes() != before


def test_record_from_another_spec_refused(setup, capsys, monkeypatch, tmp_path):
    other = tmp_path / "other.toml"
    other.write_text(setup["spec"].read_text("utf-8") + "\n# edited\n", encoding="utf-8")
    shutil.copytree(setup["spec"].parent / "data", tmp_path / "data")
    code, o, e = _run(["sign", setup["root"] / "report.pdf", "--identity", setup["a"].p12_path,
                       "-o", tmp_path / "x.pdf", "--spec", other, "--record", setup["record"]],
                      capsys, monkeypatch)
    assert code == 2 and "another spec" in e and not (tmp_path / "x.pdf").exists()


@pytest.mark.parametrize("content", [b"", b"hello, not a PDF", b"%PDF-1.7\n\x00\xff garbage"])
def test_verify_not_a_pdf(setup, capsys, monkeypatch, tmp_path, content):
    p = tmp_path / "x.pdf"
    p.write_bytes(content)
    code, o, e = _verify(setup, p, capsys, monkeypatch)
    # no %PDF header: bad input (2); a header but nothing readable: a damaged document (1)
    assert code == (1 if content.startswith(b"%PDF") else 2)
    assert "Traceback" not in o + e


def test_unsigned_pdf_fails_verification(setup, capsys, monkeypatch):
    code, o, e = _verify(setup, setup["root"] / "report.pdf", capsys, monkeypatch)
    assert code == 1 and "no signature" in o


def test_trust_file_not_a_certificate(setup, signed, capsys, monkeypatch):
    code, o, e = _verify(setup, signed, capsys, monkeypatch, trust=[setup["spec"]])
    assert code == 2 and "certificate" in e and e.count("\n") == 1


# --------------------------------------------------------------------------- --inputs
def test_inputs_reverification(setup, signed, capsys, monkeypatch, tmp_path):
    lab = tmp_path / "lab"
    shutil.copytree(setup["spec"].parent, lab)
    code, o, e = _verify(setup, signed, capsys, monkeypatch, extra=["--inputs", lab])
    assert code == 0, o
    assert "input data/cal.csv: same" in o and "recomputed record: identical" in o
    # one reading changed in the last digit: the digest and the recomputed record both differ
    cal = lab / "data" / "cal.csv"
    cal.write_text(cal.read_text("utf-8").replace("5.0000062", "5.0000063"), encoding="utf-8")
    code, o, e = _verify(setup, signed, capsys, monkeypatch, extra=["--inputs", lab])
    assert code == 1
    assert "input data/cal.csv: changed" in o and "recomputed record: DIFFERENT" in o
    assert "data/cal.csv has changed" in o
    cal.unlink()
    code, o, e = _verify(setup, signed, capsys, monkeypatch, extra=["--inputs", lab])
    assert code == 1 and "missing" in o


def test_inputs_reverification_of_an_older_record_format(setup, capsys, monkeypatch,
                                                        tmp_path):
    # A record written in the older format qcs-budget/record-1: this version writes other
    # bytes for the same inputs (record-2 added Monte Carlo fields), so a byte comparison
    # cannot succeed. verify must say so in one line (exit 1, a failed check as for any
    # failed recompute: DESIGN.md exit codes) instead of listing field differences, and still
    # compare the input files' digests.
    s = setup
    old = s["record"].read_text("utf-8").replace('"schema": "qcs-budget/record-2"',
                                                 '"schema": "qcs-budget/record-1"', 1)
    assert '"qcs-budget/record-1"' in old
    pdf = tmp_path / "old-signed.pdf"
    pdf.write_bytes(signing.sign_pdf((s["root"] / "report.pdf").read_bytes(), s["a"].p12_path,
                                     PASSPHRASE, reason="approved", location="Invented Lab",
                                     record_json=old, spec_text=s["spec"].read_bytes()))
    code, o, e = _verify(setup, pdf, capsys, monkeypatch)
    assert code == 0, o                                 # the signature itself is intact
    lab = tmp_path / "lab"
    shutil.copytree(s["spec"].parent, lab)
    code, o, e = _verify(setup, pdf, capsys, monkeypatch, extra=["--inputs", lab])
    assert code == 1
    failed = [ln for ln in o.splitlines() if ln.startswith("FAILED")]
    assert len(failed) == 1, o
    assert ("older record format qcs-budget/record-1" in failed[0]
            and "cannot be compared with it byte for byte" in failed[0])
    assert "differs" not in o and "DIFFERENT" not in o
    assert "input data/cal.csv: same" in o
    assert "recomputed record: not compared (older record format qcs-budget/record-1)" in o
    # a changed input file is still found
    cal = lab / "data" / "cal.csv"
    cal.write_text(cal.read_text("utf-8").replace("5.0000062", "5.0000063"), encoding="utf-8")
    code, o, e = _verify(setup, pdf, capsys, monkeypatch, extra=["--inputs", lab])
    assert code == 1 and "data/cal.csv has changed" in o


def test_latin1_folding_for_the_visible_block():
    # NFKD decomposition (Unicode Standard Annex #15) splits ř into r + combining caron;
    # á, ö and ß are Latin-1 already (ISO/IEC 8859-1) and stay; Ł has no decomposition
    assert signing._latin1("Dvořák Öß Łukasz") == "Dvorák Öß Lukasz"


def test_inputs_from_an_archive(setup, signed, capsys, monkeypatch, tmp_path):
    """--inputs also takes an archive written by run --archive (the evidence kept for years)."""
    from budget.archive import archive
    spec = load_spec(setup["spec"])
    archive(spec, evaluate(spec), tmp_path / "arch")
    code, o, e = _verify(setup, signed, capsys, monkeypatch,
                         extra=["--inputs", tmp_path / "arch"])
    assert code == 0, o
    assert "recomputed record: identical" in o


def test_record_not_a_record_names_the_file(setup, capsys, monkeypatch, tmp_path):
    bad = tmp_path / "bad.json"
    bad.write_text('{"schema": "something else"}', encoding="utf-8")
    code, o, e = _run(["sign", setup["root"] / "report.pdf", "--identity", setup["a"].p12_path,
                       "-o", tmp_path / "x.pdf", "--spec", setup["spec"], "--record", bad],
                      capsys, monkeypatch)
    assert code == 2 and e.count("\n") == 1 and str(bad) in e and "schema" in e
    # without --record and --spec, an unsigned report carries no evidence to embed
    code, o, e = _run(["sign", setup["root"] / "report.pdf", "--identity", setup["a"].p12_path,
                       "-o", tmp_path / "x.pdf"], capsys, monkeypatch)
    assert code == 2 and "--record and --spec" in e and not (tmp_path / "x.pdf").exists()
