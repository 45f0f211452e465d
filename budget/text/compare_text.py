"""A comparison of runs as text, as ``budget compare`` shows it."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

from ..fmt import fmt_num, fmt_u, fmt_value
from .tables import section, table
from .tables import unit_suffix as _unit

if TYPE_CHECKING:  # pragma: no cover - annotations only
    from ..compare import Comparison, NormalisedError

__all__ = ["compare_text", "en_rows"]

_EN_HEADERS = ["result", "against", "difference", "U(diff)", "E_n", "", "shared terms"]


def _larger(m) -> str:
    """Which of the mean's internal and external u is the larger (the one to quote)."""
    return "external" if m.external_uncertainty > m.internal_uncertainty else "internal"


def en_rows(rows: Sequence[NormalisedError]) -> list[list[str]]:
    """Table cells of normalised errors: verdict ``pass`` for |E_n| ≤ 1 (ISO 13528), ``FAIL``
    above, ``–`` when E_n is undefined; the shared terms' names cut to 30 characters."""
    out = []
    for e in rows:
        verdict = "–" if e.en is None else ("pass" if abs(e.en) <= 1 else "FAIL")
        shared = ", ".join(e.shared) or "none"
        out.append([e.a, e.b, fmt_value(e.difference, e.expanded_uncertainty or abs(e.difference)),
                    fmt_u(e.expanded_uncertainty), "–" if e.en is None else f"{e.en:.2f}",
                    verdict, shared if len(shared) <= 30 else shared[:29] + "…"])
    return out


def compare_text(c: Comparison, files: Sequence[str]) -> str:
    """The comparison: runs, reference, weighted mean, E_n tables and shared terms.

    Parameters
    ----------
    c : Comparison
        From :func:`budget.compare.compare_runs`.
    files : sequence of str
        The record file of each run, in the order of ``c.runs`` (only the file name is shown,
        cut to 24 characters).

    Returns
    -------
    str
        The text, lines without trailing spaces. Expanded uncertainties are shown as stated
        (with their k) and as used (k = 2).
    """
    from ..compare import (  # deferred: budget.text stays free of numpy at import
        en_basis_text,
        used_k_text,
    )
    unit = _unit(c.unit)
    head = f"Comparison of runs — {c.measurand}" + (f" ({c.unit})" if unit else "")
    out = [head, "=" * len(head)]
    rows = []
    for r, f in zip(c.runs, files):
        name = Path(f).name
        rows.append([r.label, name if len(name) <= 24 else name[:23] + "…", r.date,
                     fmt_value(r.value, r.expanded_uncertainty),
                     f"{fmt_u(r.stated_expanded_uncertainty)} ({r.stated_coverage_factor:.2f})",
                     fmt_u(r.expanded_uncertainty)])
    used = "U used" if c.en_basis == "stated" else "U used (k = 2)"
    out.append(table(["run", "record", "date", "value", "U stated (k)", used],
                     rows, right={3, 4, 5}))
    out = [ln.rstrip() for block in out for ln in block.split("\n")]
    for r in c.runs:
        out += section(f"  {r.label}", r.title)
    if c.reference is not None:
        r = c.reference
        src = f", from the record “{r.title}”" if c.reference_kind == "record" else ""
        out += ["", f"reference: {fmt_value(r.value, r.expanded_uncertainty)} ± "
                    f"{fmt_u(r.expanded_uncertainty)}{unit} ({used_k_text(r, c.en_basis)}){src}"]
    if c.mean is not None:
        m = c.mean
        out += ["", f"weighted mean x̄ = {fmt_value(m.value, m.internal_uncertainty)}{unit}, "
                    f"internal u = {fmt_u(m.internal_uncertainty)}, external u = "
                    f"{fmt_u(m.external_uncertainty)} (= R_B × internal)",
                f"(common practice: quote the larger of the two, here the {_larger(m)} u)",
                "(generalised least squares with the runs' covariance)",
                f"Birge ratio R_B = {fmt_num(m.birge_ratio, 3)}, χ² = {fmt_num(m.chi2, 4)} "
                f"with ν = {m.dof}, p = {fmt_num(m.p_value, 3)}"]
    what = "the reference" if c.reference is not None else "the weighted mean (run included in it)"
    out += ["", f"E_n against {what}:", *section("  basis", en_basis_text(c.en_basis)),
            table(_EN_HEADERS, en_rows(c.en), right={2, 3, 4})]
    if c.pairwise:
        out += ["", "pairwise E_n:", table(_EN_HEADERS, en_rows(c.pairwise), right={2, 3, 4})]
    out += ["", "terms across runs (shared only when declared, or systematic from the same file):"]
    for t in c.terms:
        out += section(f"  {t.name}", f"{', '.join(t.runs)} — {t.basis}")
    for n in c.notes:
        out += section("note", n)
    return "\n".join(ln.rstrip() for block in out for ln in block.split("\n"))
