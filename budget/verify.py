"""Verifying signed reports: every signature, the signer's trust, later revisions, evidence.

:func:`verify_pdf` checks every signature of a PDF signed by :func:`budget.signing.sign_pdf`
(or any PAdES/PDF signature): intact (the signed bytes hash to the signed digest), valid (the
signature over them), trusted (the signer's certificate is, or chains to, a given
certificate) and that no later revision changed content — only form filling (e.g. a further
signature) and validation data (ISO 32000-2 §12.8.2.2 "LTV" updates) may follow a signature.
The embedded evidence (record, spec, input manifest) is read from the *signed* revision, not
from whatever may have been appended later. A later change of the document's metadata (its
title, say) counts as content and fails; whatever was appended and accepted is listed
(:mod:`budget.pdf_revisions`). Validation uses pyHanko's validation API with the
given certificates as the only trust roots and no network access.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from .errors import DataError
from .pdf_evidence import ATTACHMENTS, attachments_of, open_pdf
from .pdf_revisions import after_signing

__all__ = ["verify_pdf", "VerifyResult", "SignatureCheck"]


@dataclass(frozen=True)
class SignatureCheck:
    """One signature of the document and what was found about it.

    ``modification`` names the most invasive change made after this signature:
    "none", "validation data", "form filling", "annotations" or "other".
    """

    field: str
    signer: str
    role: str
    signing_time: str | None
    intact: bool
    valid: bool
    trusted: bool
    covers_document: bool
    modification: str
    problems: tuple[str, ...]

    def to_dict(self) -> dict[str, Any]:
        return {"field": self.field, "signer": self.signer, "role": self.role,
                "signing_time": self.signing_time, "intact": self.intact, "valid": self.valid,
                "trusted": self.trusted, "covers_document": self.covers_document,
                "modification": self.modification, "problems": list(self.problems)}


@dataclass(frozen=True)
class VerifyResult:
    """What :func:`verify_pdf` found.

    Attributes
    ----------
    intact : bool
        Every signature is intact and cryptographically valid.
    trusted : bool
        Every signer's certificate chains to a trusted certificate.
    covers_document : bool
        No later revision changes content: each signature covers the whole file, or what
        follows it only fills form fields (e.g. a further signature) or adds validation data.
    signer, role, signing_time : str
        Of the latest signature (signing time as the signer's clock stated it, ISO 8601).
    record, spec, manifest
        The embedded evidence from the latest signature's signed revision (None if absent).
    problems : tuple of str
        Everything that failed, as sentences; empty when the document verifies.
    accepted : tuple of str
        What follows the latest signature and was accepted (revisions that only fill forms or
        add validation data, bytes after the final ``%%EOF``), as sentences
        (:mod:`budget.pdf_revisions`); empty when the file ends with the signed revision.
    """

    intact: bool
    trusted: bool
    covers_document: bool
    signer: str
    role: str
    signing_time: str | None
    signatures: tuple[SignatureCheck, ...]
    record: str | None
    spec: bytes | None
    manifest: dict[str, Any] | None
    problems: tuple[str, ...] = field(default=())
    accepted: tuple[str, ...] = field(default=())

    @property
    def ok(self) -> bool:
        return self.intact and self.trusted and self.covers_document and not self.problems

    def to_dict(self) -> dict[str, Any]:
        return {"ok": self.ok, "intact": self.intact, "trusted": self.trusted,
                "covers_document": self.covers_document, "signer": self.signer,
                "role": self.role, "signing_time": self.signing_time,
                "signatures": [s.to_dict() for s in self.signatures],
                "has_record": self.record is not None, "has_spec": self.spec is not None,
                "manifest": self.manifest, "problems": list(self.problems),
                "accepted": list(self.accepted)}


def _load_trust(trust_pem) -> list:
    from asn1crypto import pem as a_pem
    from asn1crypto import x509 as a_x509
    paths = [trust_pem] if isinstance(trust_pem, (str, Path)) else list(trust_pem)
    roots = []
    for p in paths:
        try:
            data = Path(p).read_bytes()
        except OSError:
            raise DataError("trusted certificate file not found or unreadable", file=str(p),
                            field="--trust") from None
        try:
            if a_pem.detect(data):
                blobs = [der for _, _, der in a_pem.unarmor(data, multiple=True)]
            else:
                blobs = [data]
            certs = [a_x509.Certificate.load(b) for b in blobs]
            for c in certs:
                _ = c.subject.human_friendly  # forces parsing
        except Exception:  # asn1crypto raises ValueError, TypeError... on garbage
            raise DataError("not an X.509 certificate (PEM or DER)", file=str(p),
                            field="--trust") from None
        if not certs:
            raise DataError("no certificate in this file", file=str(p), field="--trust")
        roots.extend(certs)
    return roots


_TRUST_WHY = {
    "": "no chain to a trusted certificate",
    "CHAIN_CONSTRAINTS_FAILURE": "its certificate is not, and does not chain to, a trusted one",
    "NO_CERTIFICATE_CHAIN_FOUND": "its certificate does not chain to a trusted one",
    "EXPIRED": "its certificate has expired; without a trusted timestamp the signature can no "
               "longer be checked",
    "OUT_OF_BOUNDS_NO_POE": "its certificate has expired; without a trusted timestamp the "
                            "signature can no longer be checked",
    "NOT_YET_VALID": "its certificate is not valid yet",
    "REVOKED": "its certificate was revoked",
    "REVOKED_NO_POE": "its certificate was revoked",
}
_LEVELS = {"NONE": "none", "LTA_UPDATES": "validation data", "FORM_FILLING": "form filling",
           "ANNOTATIONS": "annotations", "OTHER": "other"}


def _check_one(emb, roots) -> SignatureCheck:
    from pyhanko.sign.diff_analysis import ModificationLevel
    from pyhanko.sign.validation import validate_pdf_signature
    from pyhanko.sign.validation.settings import KeyUsageConstraints
    from pyhanko_certvalidator import ValidationContext

    problems: list[str] = []
    fname = str(emb.field_name)
    try:
        cert = emb.signer_cert
        subj = cert.subject.native
        name, role = str(subj.get("common_name", "")), str(subj.get("title", ""))
    except Exception:  # a damaged CMS object
        name, role = "", ""
    vc = ValidationContext(trust_roots=list(roots), allow_fetching=False)
    ku = KeyUsageConstraints(key_usage={"digital_signature", "non_repudiation"},
                             match_all_key_usages=False)
    try:
        st = validate_pdf_signature(emb, vc, key_usage_settings=ku)
    except Exception as exc:  # malformed signature objects raise from deep inside pyHanko
        return SignatureCheck(fname, name, role, None, False, False, False, False, "other",
                              (f"signature '{fname}' cannot be checked: "
                               f"{type(exc).__name__}: {exc}",))
    when = st.signer_reported_dt.isoformat() if st.signer_reported_dt else None
    if not st.intact:
        problems.append(f"signature '{fname}': the signed bytes were changed (digest mismatch)")
    elif not st.valid:
        problems.append(f"signature '{fname}': the signature value is not valid")
    trusted = bool(st.trusted)
    if st.intact and st.valid and not trusted:
        ind = st.trust_problem_indic.name if st.trust_problem_indic is not None else ""
        why = _TRUST_WHY.get(ind, ind.lower().replace("_", " ") or _TRUST_WHY[""])
        problems.append(f"signature '{fname}': the signer ({name or 'unknown'}) is not trusted "
                        f"({why})")
    level = st.modification_level
    covers = level is not None and level <= ModificationLevel.FORM_FILLING
    if st.coverage is None or st.coverage.name not in ("ENTIRE_FILE", "ENTIRE_REVISION"):
        covers = False
        problems.append(f"signature '{fname}' does not cover its whole revision")
    elif not covers:
        what = _LEVELS.get(level.name, level.name.lower()) if level is not None else "unknown"
        problems.append(f"signature '{fname}': the document was changed after signing "
                        f"(a later revision made changes of kind: {what})")
    return SignatureCheck(field=fname, signer=name, role=role, signing_time=when,
                          intact=bool(st.intact and st.valid), valid=bool(st.valid),
                          trusted=trusted, covers_document=covers,
                          modification=_LEVELS.get(level.name, "other") if level else "unknown",
                          problems=tuple(problems))


def verify_pdf(pdf_bytes: bytes, trust_pem, *, file: str | None = None) -> VerifyResult:
    """Check every signature of a signed report and read the embedded evidence.

    Parameters
    ----------
    pdf_bytes : bytes
        The signed PDF.
    trust_pem : str, Path or list of them
        Certificate file(s) (PEM or DER) to trust: a self-made identity's ``identity.pem``
        or a lab's root certificate.
    file : str
        How to name the PDF in error messages.

    Raises
    ------
    DataError
        When the file is not a PDF at all, or a trust file is not a certificate. A PDF that is
        damaged or tampered with is not an error: it yields ``problems`` (a failed check).
    """
    roots = _load_trust(trust_pem)
    if pdf_bytes.lstrip()[:5] != b"%PDF-":
        raise DataError("not a PDF file", file=file)
    empty = VerifyResult(False, False, False, "", "", None, (), None, None, None)
    try:
        reader = open_pdf(pdf_bytes, file)
        sigs = sorted(reader.embedded_regular_signatures, key=lambda s: s.signed_revision)
    except DataError as exc:
        return _replace(empty, problems=(f"the PDF is damaged: {exc.message}",))
    except Exception as exc:  # a damaged signature dictionary
        return _replace(empty, problems=(f"the PDF is damaged: {type(exc).__name__}: {exc}",))
    if not sigs:
        return _replace(empty, problems=("the PDF carries no signature",))
    checks = tuple(_check_one(s, roots) for s in sigs)
    problems = [p for c in checks for p in c.problems]
    last = sigs[-1]
    try:
        signed = attachments_of(reader.get_historical_resolver(last.signed_revision).root)
        latest = attachments_of(reader.root)
    except Exception as exc:  # a damaged name tree
        signed, latest = {}, {}
        problems.append(f"the embedded files cannot be read: {type(exc).__name__}: {exc}")
    for fname in ATTACHMENTS.values():
        if fname not in signed:
            problems.append(f"the signed revision carries no {fname}")
        elif latest.get(fname) != signed[fname]:
            problems.append(f"{fname} was replaced after signing")
    try:  # metadata changed after signing counts as content; report what was accepted
        more, accepted = after_signing(reader, pdf_bytes, last.signed_revision,
                                       str(last.field_name))
    except Exception as exc:  # noqa: BLE001 - a damaged cross-reference history
        more, accepted = [f"the revisions after signing cannot be read: "
                          f"{type(exc).__name__}: {exc}"], []
    problems += more
    record = signed.get(ATTACHMENTS["record"])
    spec = signed.get(ATTACHMENTS["spec"])
    manifest = None
    if ATTACHMENTS["manifest"] in signed:
        try:
            manifest = json.loads(signed[ATTACHMENTS["manifest"]])
        except ValueError:
            problems.append(f"{ATTACHMENTS['manifest']} is not valid JSON")
    if record is not None:
        try:
            record_text = record.decode("utf-8")
        except UnicodeDecodeError:
            record_text = None
            problems.append(f"{ATTACHMENTS['record']} is not UTF-8 text")
    else:
        record_text = None
    if manifest is not None and spec is not None:
        if (manifest.get("spec") or {}).get("sha256") != hashlib.sha256(spec).hexdigest():
            problems.append("the embedded spec does not match the digest in the manifest")
    c = checks[-1]
    return VerifyResult(intact=all(x.intact for x in checks),
                        trusted=all(x.trusted for x in checks),
                        covers_document=all(x.covers_document for x in checks),
                        signer=c.signer, role=c.role, signing_time=c.signing_time,
                        signatures=checks, record=record_text, spec=spec, manifest=manifest,
                        problems=tuple(dict.fromkeys(problems)), accepted=tuple(accepted))


def _replace(r: VerifyResult, **kw) -> VerifyResult:
    return replace(r, **kw)
