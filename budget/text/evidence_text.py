"""Text of the evidence commands: the reference checks of ``budget validate``, a new signing
identity, and the findings of ``budget verify``."""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

from .tables import table

if TYPE_CHECKING:  # pragma: no cover - annotations only
    from ..recompute import RecheckResult
    from ..references import Check
    from ..signing import Identity
    from ..verify import VerifyResult

__all__ = ["identity_text", "recompute_text", "signatures_text", "validate_text",
           "verdict_text"]

_YES = {True: "yes", False: "NO"}


def validate_text(checks: Sequence[Check]) -> str:
    """The reference checks: a table of published and computed numbers, the sources, a count.

    Parameters
    ----------
    checks : sequence of Check
        From :func:`budget.references.run_all`.

    Returns
    -------
    str
        The table (numbers with 10 significant digits, tolerance with 2), a blank line, one
        ``source`` line per case (in first-seen order), a blank line and ``N of M checks
        passed``.
    """
    rows = [[c.case, c.quantity, f"{c.published:.10g}", f"{c.computed:.10g}",
             f"{c.tolerance:.2g}", "pass" if c.passed else "FAIL"] for c in checks]
    out = [table(["case", "quantity", "published", "computed", "tolerance", "result"], rows,
                 right={2, 3, 4}), ""]
    out += [f"source  {src}" for src in dict.fromkeys(f"{c.case}: {c.source}" for c in checks)]
    failed = sum(1 for c in checks if not c.passed)
    out += ["", f"{len(checks) - failed} of {len(checks)} checks passed"]
    return "\n".join(out)


def identity_text(ident: Identity) -> str:
    """A new signing identity: signer, the two files and the certificate's SHA-256 fingerprint."""
    role = f" ({ident.role})" if ident.role else ""
    return "\n".join([
        f"identity for {ident.name}{role}",
        f"  private key and certificate: {ident.p12_path} (keep it and its passphrase safe)",
        f"  certificate for verifiers:   {ident.pem_path}",
        f"  SHA-256 fingerprint: {ident.fingerprint}"])


def signatures_text(res: VerifyResult) -> str:
    """Each signature of a verified PDF (signer, role, claimed time, intact, trusted, changes
    after signing) and the embedded evidence manifest; empty when there is neither."""
    out = []
    for s in res.signatures:
        role = f" ({s.role})" if s.role else ""
        out.append(f"signature '{s.field}': {s.signer or 'unknown signer'}{role}, signed "
                   f"{s.signing_time or 'at an unknown time'} (signer's clock)")
        out.append(f"  intact: {_YES[s.intact]}   trusted: {_YES[s.trusted]}   "
                   f"changes after signing: {s.modification}")
    for a in res.accepted:
        out.append(f"accepted after signing: {a}")
    if res.manifest is not None:
        m = res.manifest
        out.append(f"evidence: record, spec {m.get('spec', {}).get('file', '?')} "
                   f"and {len(m.get('files', []))} input file(s) in the manifest")
    return "\n".join(out)


def recompute_text(chk: RecheckResult) -> str:
    """The status of each input file against the signed manifest and whether the re-run
    record is identical byte for byte."""
    out = [f"input {f.path}: {f.status}" for f in chk.files]
    if chk.older_format:
        out.append(f"recomputed record: not compared (older record format {chk.older_format})")
    else:
        out.append(f"recomputed record: {'identical' if chk.record_identical else 'DIFFERENT'}")
    return "\n".join(out)


def verdict_text(problems: Sequence[str], inputs_checked: bool) -> str:
    """The verdict of ``budget verify``: one ``FAILED`` line per problem and the count, or the
    success line (mentioning the inputs when they were re-run)."""
    if problems:
        n = len(problems)
        return "\n".join([*(f"FAILED: {p}" for p in problems),
                          f"verification failed ({n} problem{'s' if n > 1 else ''})"])
    return ("verified: intact, trusted, unchanged since signing"
            + ("; inputs and record reproduced" if inputs_checked else ""))
