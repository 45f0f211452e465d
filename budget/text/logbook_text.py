"""Plain text of ``budget logbook list``, ``show`` and ``trend`` (returns strings; never prints)."""

from __future__ import annotations

from collections.abc import Sequence

from ..fmt import fmt_num, fmt_u, fmt_value
from ..measurands import default_measurand
from .tables import table

__all__ = ["logbook_list_text", "logbook_show_text", "logbook_trend_text", "main_measurand"]


def main_measurand(names: Sequence[str]) -> str | None:
    """The measurand a list shows: the chain deviation (``delta_I``, or the first name
    starting with "dev"), else the first (:func:`budget.measurands.default_measurand`)."""
    return default_measurand(list(names))


def _u(unit: str) -> str:
    return f" {unit}" if unit not in ("", "1") else ""


def logbook_list_text(entries, book: str) -> str:
    """One line per record: number, date, chain, the main measurand with U (k as stated)."""
    if not entries:
        return f"{book}: no record matches"
    rows = []
    for e in entries:
        names = [m["name"] for m in e.measurands]
        main = main_measurand(names)
        m = next((x for x in e.measurands if x["name"] == main), None)
        val = "" if m is None else (f"{main} = {fmt_value(m['value'], m['expanded_uncertainty'])}"
                                    f" ± {fmt_u(m['expanded_uncertainty'])}{_u(m['unit'])}"
                                    f" (k = {m['coverage_factor']:.2f})")
        rows.append([f"#{e.id}", (e.date_start or "no date").replace("T", " "), e.chain or "-",
                     e.pump or "-", val, e.sha256[:12]])
    head = ["id", "measured", "chain", "pump", "result", "sha256"]
    return (table(head, rows, right=set()) + f"\n\n{len(entries)} record"
            f"{'' if len(entries) == 1 else 's'} in {book}")


def logbook_show_text(stored) -> str:
    """The fixed sections of one stored record: identity, digests, results, calibrations."""
    e = stored.entry
    lines = [f"record #{e.id}: {e.title}",
             f"  measured        {e.date_start or 'no date'} to {e.date_end or '-'}",
             f"  chain           {e.chain or '-'}",
             f"  pump            {e.pump or '-'}",
             f"  frequency       {'-' if e.frequency_Hz is None else f'{e.frequency_Hz:.12g} Hz'}",
             f"  file added      {e.file_name} ({e.added_utc})",
             f"  record sha256   {e.sha256} (checked)",
             f"  spec sha256     {stored.spec_sha256 or '-'}",
             f"  inputs manifest {stored.manifest_sha256}", "", "results"]
    for m in e.measurands:
        lines.append(f"  {m['name']} = {fmt_value(m['value'], m['expanded_uncertainty'])} ± "
                     f"{fmt_u(m['expanded_uncertainty'])}{_u(m['unit'])} "
                     f"(k = {m['coverage_factor']:.2f}; u = "
                     f"{fmt_u(m['standard_uncertainty'])})")
    lines += ["", "calibrations used"]
    if not stored.calibrations:
        lines.append("  none recorded")
    for c in stored.calibrations:
        if c["kind"] == "file":
            when = f", last calibration {c['calibration_date']}" if c["calibration_date"] else ""
            lines.append(f"  {c['input']}: {c['module']} file {c['path']}, sha256 "
                         f"{c['identifier']}{when}")
        else:
            lines.append(f"  {c['input']}: typed in, source “{c['identifier']}”")
    return "\n".join(lines)


def logbook_trend_text(t) -> str:
    """Chains' weighted means, the step tests and the flags of a Trend."""
    unit = _u(t.unit)
    lines = [f"trend of {t.measurand}{' in ' + t.unit if unit else ''}: {len(t.points)} runs",
             ""]
    rows = []
    for c in t.chains:
        m = c.mean
        rows.append([c.chain, str(m.n), fmt_value(m.value, m.standard_uncertainty),
                     fmt_u(m.standard_uncertainty), "-" if m.dof == 0 else fmt_num(m.chi2, 3),
                     str(m.dof), "-" if m.p_value is None else fmt_num(m.p_value, 2),
                     "-" if m.birge_ratio is None else fmt_num(m.birge_ratio, 3)])
    lines.append(table(["chain", "runs", "weighted mean", "u", "χ²", "ν", "p", "Birge"], rows))
    lines += ["", "step tests at recalibrations (E_n, k = 2)"]
    if not t.steps:
        lines.append("  none: no calibration changed between two runs of one chain")
    for s in t.steps:
        r = s.recalibration
        stat = s.note if s.en is None else (
            f"after − before = {fmt_value(s.difference, 2 * s.standard_uncertainty)}{unit}, "
            f"E_n = {s.en:.2f}{'  FLAGGED' if s.flagged else ''}")
        lines.append(f"  {r.chain}, {r.date_from[:10]} → {r.date_to[:10]}: {stat}")
        lines.append(f"      changed: {r.label()}")
    lines += ["", f"flags ({len(t.flags)})"]
    if not t.flags:
        lines.append("  none")
    for f in t.flags:
        lines.append(f"  [{f.kind}] {f.message}")
    if t.false_alarms:
        lines.append(f"  false alarms: {t.false_alarms['text']}")
    if t.notes:
        lines += ["", "notes"] + [f"  {n}" for n in t.notes]
    return "\n".join(lines)
