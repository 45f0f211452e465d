"""Signed reports: signing identities and PAdES signatures with embedded evidence.

* :func:`create_identity` writes ``identity.p12`` (an EC P-256 private key and a self-signed
  X.509 certificate naming the signer and role, encrypted with a passphrase) and
  ``identity.pem`` (the certificate alone, for verifiers) — for labs without their own PKI. A
  PKCS#12 file from a lab's PKI is used the same way.
* :func:`sign_pdf` embeds the result record, the spec and the input-file manifest as PDF
  attachments (:data:`ATTACHMENTS`) and signs the document in the same revision, so the
  signature covers them: a PAdES baseline signature (ETSI EN 319 142-1, level B-B) made with
  pyHanko, with a visible signature block (signer's name, role, date; reason when given).
* Verification is :func:`budget.verify.verify_pdf`; both read attachments through
  :mod:`budget.pdf_evidence`, which sits below them (neither imports the other).

Passphrases and keys are used in memory only: never logged, never written except into the
encrypted PKCS#12 file, never put into a record, a PDF or an error message.
"""

from __future__ import annotations

import datetime as _dt
import io
import json
import os
import unicodedata
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .errors import DataError, UsageError
from .pdf_evidence import ATTACHMENTS, attachments_of, open_pdf, read_attachments

__all__ = ["ATTACHMENTS", "Identity", "create_identity", "sign_pdf", "read_attachments",
           "identity_of", "SIGNATURE_BOX"]

#: Default visible signature block on the last page: (right margin, bottom margin, width,
#: height) in PDF points (1/72 inch), measured from the page's lower-right corner.
SIGNATURE_BOX = (56, 36, 250, 72)
_FIELD = "Approval"
_VALID_DAYS = 20 * 366   # a self-made identity must outlive the reports it signs
_MIN_PASSPHRASE = 8      # characters; the PKCS#12 file is only as strong as its passphrase


def _pw(passphrase: str | bytes) -> bytes:
    return passphrase.encode("utf-8") if isinstance(passphrase, str) else bytes(passphrase)


def _clean_text(value: str, what: str) -> str:
    v = " ".join(str(value).split())
    if any(unicodedata.category(c).startswith("C") for c in v):
        raise UsageError(f"{what} must not contain control characters", field=what)
    if len(v) > 64:  # ub-common-name and ub-title of RFC 5280 appendix A
        raise UsageError(f"{what} must have at most 64 characters; got {len(v)}", field=what)
    return v


# --------------------------------------------------------------------------- identities
@dataclass(frozen=True)
class Identity:
    """A signing identity on disk: who it names and where its files are.

    ``fingerprint`` is the SHA-256 of the certificate (DER), in hex.
    """

    name: str
    role: str
    p12_path: str
    pem_path: str
    fingerprint: str

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "role": self.role, "p12_path": self.p12_path,
                "pem_path": self.pem_path, "fingerprint": self.fingerprint}


def create_identity(name: str, role: str, out_dir: str | Path, passphrase: str | bytes, *,
                    force: bool = False, valid_days: int = _VALID_DAYS) -> Identity:
    """Write ``out_dir/identity.p12`` and ``out_dir/identity.pem``.

    Parameters
    ----------
    name : str
        The signer's name (certificate common name), at most 64 characters.
    role : str
        The signer's role (certificate title), e.g. "Head of laboratory"; may be "".
    out_dir : str or Path
        Folder for the two files; created when absent (its parent must exist).
    passphrase : str or bytes
        Encrypts the PKCS#12 file (PBES2, AES-256-CBC, PBKDF2; SHA-256 MAC); at least 8
        characters.
    force : bool
        Replace existing identity files. Default False.
    valid_days : int
        Validity of the certificate in days. Default about 20 years.
    """
    from cryptography import x509
    from cryptography.hazmat.primitives import hashes, serialization
    from cryptography.hazmat.primitives.asymmetric import ec
    from cryptography.hazmat.primitives.serialization import pkcs12
    from cryptography.x509.oid import NameOID

    from .staging import OutputSet

    name = _clean_text(name, "--name")
    role = _clean_text(role or "", "--role")
    if not name:
        raise UsageError("the signer's name must not be empty", field="--name")
    pw = _pw(passphrase)
    if len(pw) < _MIN_PASSPHRASE:
        raise UsageError(f"the passphrase must have at least {_MIN_PASSPHRASE} characters",
                         field="passphrase")
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise UsageError("exists and is not a folder", file=str(out_dir), field="--out")
    if not out.parent.is_dir():
        raise UsageError("the folder it would go in does not exist", file=str(out_dir),
                         field="--out")
    p12_path, pem_path = out / "identity.p12", out / "identity.pem"
    for p in (p12_path, pem_path):
        if p.exists() and not force:
            raise UsageError("exists already; use --force to replace it", file=str(p),
                             field="--out")
    key = ec.generate_private_key(ec.SECP256R1())
    attrs = [x509.NameAttribute(NameOID.COMMON_NAME, name)]
    if role:
        attrs.append(x509.NameAttribute(NameOID.TITLE, role))
    subject = x509.Name(attrs)
    now = _dt.datetime.now(_dt.UTC).replace(microsecond=0)
    cert = (x509.CertificateBuilder()
            .subject_name(subject).issuer_name(subject).public_key(key.public_key())
            .serial_number(x509.random_serial_number())
            .not_valid_before(now - _dt.timedelta(minutes=5))
            .not_valid_after(now + _dt.timedelta(days=valid_days))
            .add_extension(x509.BasicConstraints(ca=False, path_length=None), critical=True)
            # digitalSignature + nonRepudiation (contentCommitment): a signature that commits
            # the signer to the content, as PAdES validators expect (RFC 5280 §4.2.1.3)
            .add_extension(x509.KeyUsage(digital_signature=True, content_commitment=True,
                                         key_encipherment=False, data_encipherment=False,
                                         key_agreement=False, key_cert_sign=False,
                                         crl_sign=False, encipher_only=False,
                                         decipher_only=False), critical=True)
            .add_extension(x509.SubjectKeyIdentifier.from_public_key(key.public_key()),
                           critical=False)
            .sign(key, hashes.SHA256()))
    enc = (serialization.PrivateFormat.PKCS12.encryption_builder()
           .kdf_rounds(100_000)
           .key_cert_algorithm(pkcs12.PBES.PBESv2SHA256AndAES256CBC)
           .hmac_hash(hashes.SHA256()).build(pw))
    p12 = pkcs12.serialize_key_and_certificates(name.encode("utf-8"), key, cert, None, enc)
    pem = cert.public_bytes(serialization.Encoding.PEM)
    with OutputSet() as staged:            # both files or neither (and no empty folder)
        if out.is_dir():
            staged.file(p12_path, p12, force=force, mode=0o600)  # the private key
            staged.file(pem_path, pem, force=force, mode=0o644)  # the certificate is public
        else:
            staged.folder(out, lambda tmp: _write_identity(tmp, p12, pem))
        staged.commit()
    return Identity(name=name, role=role, p12_path=str(p12_path), pem_path=str(pem_path),
                    fingerprint=cert.fingerprint(hashes.SHA256()).hex())


def _write_identity(folder: Path, p12: bytes, pem: bytes) -> None:
    """The two identity files in a new folder (mode 0700; the key file 0600)."""
    os.chmod(folder, 0o700)
    for name, data, mode in (("identity.p12", p12, 0o600), ("identity.pem", pem, 0o644)):
        fd = os.open(folder / name, os.O_WRONLY | os.O_CREAT | os.O_EXCL, mode)
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())


def _load_p12(p12_path: str | Path, passphrase: str | bytes):
    """(private key, certificate, other certificates) of a PKCS#12 file; clear errors."""
    from asn1crypto import pkcs12 as a_pkcs12
    from cryptography.hazmat.primitives.serialization import pkcs12

    p = Path(p12_path)
    try:
        data = p.read_bytes()
    except FileNotFoundError:
        raise UsageError("identity file not found", file=str(p12_path),
                         field="--identity") from None
    except OSError as exc:
        raise UsageError(f"cannot read the identity file ({exc.strerror})",
                         file=str(p12_path), field="--identity") from None
    try:
        _ = a_pkcs12.Pfx.load(data).native  # structure only; decryption needs the passphrase
    except Exception:  # asn1crypto raises ValueError, TypeError... on garbage
        raise UsageError("not a PKCS#12 identity file", file=str(p12_path),
                         field="--identity") from None
    try:
        key, cert, others = pkcs12.load_key_and_certificates(data, _pw(passphrase))
    except ValueError:
        raise UsageError("wrong passphrase for this identity file", file=str(p12_path),
                         field="passphrase") from None
    if key is None or cert is None:
        raise UsageError("the identity file holds no private key and certificate",
                         file=str(p12_path), field="--identity")
    return key, cert, others or []


def _subject_parts(subject) -> tuple[str, str]:
    """(common name, title) of a pyca x509.Name."""
    from cryptography.x509.oid import NameOID

    def get(oid):
        vals = subject.get_attributes_for_oid(oid)
        return str(vals[0].value) if vals else ""
    return get(NameOID.COMMON_NAME), get(NameOID.TITLE)


def identity_of(p12_path: str | Path, passphrase: str | bytes) -> tuple[str, str]:
    """The (name, role) a PKCS#12 identity names; raises UsageError on a wrong passphrase."""
    _, cert, _ = _load_p12(p12_path, passphrase)
    return _subject_parts(cert.subject)


_LATIN = {"Ł": "L", "ł": "l", "Đ": "D", "đ": "d", "Œ": "OE", "œ": "oe", "ı": "i",
          "Ŋ": "N", "ŋ": "n", "Ħ": "H", "ħ": "h", "ſ": "s", "–": "-", "—": "-",
          "‘": "'", "’": "'", "“": '"', "”": '"'}


def _latin1(text: str) -> str:
    """Text as the standard PDF fonts can show it (Latin-1), for the visible block only.

    The visible block uses a standard font (no font file to embed); letters outside Latin-1
    lose their accents ("Dvořák" -> "Dvorak"). The certificate keeps the exact name.
    """
    out = []
    for c in text:
        if ord(c) < 256:
            out.append(c)
        elif c in _LATIN:
            out.append(_LATIN[c])
        else:
            base = "".join(b for b in unicodedata.normalize("NFKD", c) if ord(b) < 256
                           and not unicodedata.combining(b))
            out.append(base or "?")
    return "".join(out)


def _default_box(page) -> tuple[int, int, int, int]:
    box = [float(x) for x in page.get("/CropBox", page["/MediaBox"])]
    right, bottom, width, height = SIGNATURE_BOX
    x2 = int(box[2] - right)
    y1 = int(box[1] + bottom)
    return (max(int(box[0]), x2 - width), y1, x2, y1 + height)


def _report_box(pdf_bytes: bytes) -> tuple[int, tuple[int, int, int, int]] | None:
    """(0-based page, box) of the signature field the report renderer laid out, if any.

    The renderer records it in the document information (see :mod:`budget.report.render`);
    the box is rounded outwards to whole points.
    """
    import math
    try:
        from .report.render import read_signature_box
        sig = read_signature_box(pdf_bytes)
    except Exception:  # an older report, or one from elsewhere: use the default box
        return None
    if sig is None:
        return None
    x0, y0, x1, y1 = sig.rect
    return sig.page - 1, (math.floor(x0), math.floor(y0), math.ceil(x1), math.ceil(y1))


def sign_pdf(pdf_bytes: bytes, p12_path: str | Path, passphrase: str | bytes, *,
             reason: str = "", location: str = "", record_json: str | bytes,
             spec_text: str | bytes, manifest: dict[str, Any] | None = None,
             page: int = -1, box: tuple[int, int, int, int] | None = None) -> bytes:
    """Embed the evidence and sign the PDF; return the signed file's bytes.

    Parameters
    ----------
    pdf_bytes : bytes
        The report.
    p12_path : str or Path
        PKCS#12 identity (private key and certificate).
    passphrase : str or bytes
        Its passphrase.
    reason, location : str
        Stated in the signature dictionary and the visible block. Default "".
    record_json : str or bytes
        The result record the report shows.
    spec_text : str or bytes
        The spec it was computed from — bytes exactly as on disk, so that its digest matches
        the record's ``run.spec_sha256`` (a str is encoded as UTF-8).
    manifest : dict, optional
        Input-file manifest; default :func:`budget.archive.input_manifest` of the record.
    page : int
        Page (0-based, negative from the end) of the visible block. Default the last.
    box : tuple, optional
        (x1, y1, x2, y2) of the visible block in PDF points. Default: the signature field the
        report renderer recorded in the PDF (``/QcsSignatureBox``), else
        :data:`SIGNATURE_BOX` at the lower right of ``page``.

    Raises
    ------
    UsageError
        Wrong passphrase, unreadable identity, or evidence that contradicts what the PDF
        already carries.
    DataError
        Not a PDF, or a record that was not computed from this spec.
    """
    from pyhanko.pdf_utils import embed
    from pyhanko.pdf_utils.incremental_writer import IncrementalPdfFileWriter
    from pyhanko.pdf_utils.text import TextBoxStyle
    from pyhanko.sign import fields, signers
    from pyhanko.stamp import TextStampStyle

    from .archive import input_manifest
    from .record import record_data

    spec_bytes = spec_text.encode("utf-8") if isinstance(spec_text, str) else bytes(spec_text)
    record_bytes = record_json.encode("utf-8") if isinstance(record_json, str) else \
        bytes(record_json)
    record_data(record_bytes, file="record")
    if manifest is None:
        manifest = input_manifest(record_bytes, spec_bytes)
    manifest_bytes = (json.dumps(manifest, indent=2, ensure_ascii=False) + "\n").encode()
    payload = {ATTACHMENTS["record"]: (record_bytes, "application/json",
                                       "result record (JSON) the report was made from"),
               ATTACHMENTS["spec"]: (spec_bytes, "application/toml", "budget spec (TOML), "
                                     f"originally {manifest['spec'].get('file', '')}"),
               ATTACHMENTS["manifest"]: (manifest_bytes, "application/json",
                                         "input files with SHA-256 digests")}

    key, cert, others = _load_p12(p12_path, passphrase)
    name, role = _subject_parts(cert.subject)
    reader = open_pdf(pdf_bytes, "report")
    existing = attachments_of(reader.root)
    for fname, (data, _, _) in payload.items():
        if fname in existing and existing[fname] != data:
            raise UsageError(f"the report already carries a different {fname}; sign it with "
                             "the record and spec it was made from", field=fname)

    from pyhanko.keys import internal as keys_internal
    signer = signers.SimpleSigner(
        signing_cert=keys_internal.translate_pyca_cryptography_cert_to_asn1(cert),
        signing_key=keys_internal.translate_pyca_cryptography_key_to_asn1(key),
        cert_registry=_registry(others))
    del key  # the key object goes with the signer; nothing else holds it

    w = IncrementalPdfFileWriter(io.BytesIO(pdf_bytes), strict=False)
    for fname, (data, mime, desc) in payload.items():
        if fname in existing:  # identical (checked above): a co-signature adds nothing
            continue
        ef = embed.EmbeddedFileObject.from_file_data(
            w, data=data, mime_type=mime, params=embed.EmbeddedFileParams())
        try:
            embed.embed_file(w, embed.FileSpec(file_spec_string=fname, file_name=fname,
                                               embedded_data=ef, description=desc))
        except NotImplementedError:
            raise DataError("the report's attachment tree is nested; cannot add the "
                            "evidence to it", file="report") from None

    taken = {n for n, _, _ in fields.enumerate_sig_fields(reader)}
    empty = [n for n, v, _ in fields.enumerate_sig_fields(reader) if v is None]
    field_name = empty[0] if empty else next(
        f"{_FIELD} {i}" if i > 1 else _FIELD for i in range(1, len(taken) + 2)
        if (f"{_FIELD} {i}" if i > 1 else _FIELD) not in taken)
    pages = reader.root["/Pages"]
    n_pages = int(pages["/Count"])
    if box is None and (laid_out := _report_box(pdf_bytes)) is not None:
        page, box = laid_out
    page_index = page if page >= 0 else n_pages + page
    if not 0 <= page_index < n_pages:
        raise UsageError(f"page {page} does not exist (the report has {n_pages})",
                         field="page")
    if box is None:
        box = _default_box(reader.find_page_for_modification(page_index)[0].get_object())
    lines = ["Signed by %(name)s"] + (["%(role)s"] if role else []) + ["Date: %(ts)s"]
    params = {"name": _latin1(name), "role": _latin1(role)}
    if reason:
        lines.append("Reason: %(why)s")
        params["why"] = _latin1(reason)
    if location:
        lines.append("Place: %(where)s")
        params["where"] = _latin1(location)
    style = TextStampStyle(stamp_text="\n".join(lines),
                           timestamp_format="%Y-%m-%d %H:%M:%S %Z",
                           text_box_style=TextBoxStyle(font_size=9))
    meta = signers.PdfSignatureMetadata(
        field_name=field_name, reason=reason or None, location=location or None, name=name,
        subfilter=fields.SigSeedSubFilter.PADES, md_algorithm="sha256",
        signer_key_usage={"digital_signature", "non_repudiation"})
    spec = None if empty else fields.SigFieldSpec(field_name, on_page=page_index,
                                                  box=tuple(int(v) for v in box))
    pdf_signer = signers.PdfSigner(meta, signer=signer, stamp_style=style, new_field_spec=spec)
    out = io.BytesIO()
    try:
        pdf_signer.sign_pdf(w, output=out, appearance_text_params=params)
    except Exception as exc:  # pyHanko's SigningError and the PDF errors it passes on
        raise DataError(f"cannot sign this PDF ({type(exc).__name__}: {exc})",
                        file="report") from None
    return out.getvalue()


def _registry(others):
    from pyhanko.keys import internal as keys_internal
    from pyhanko_certvalidator.registry import SimpleCertificateStore
    cs = SimpleCertificateStore()
    cs.register_multiple(keys_internal.translate_pyca_cryptography_cert_to_asn1(c)
                         for c in others)
    return cs
