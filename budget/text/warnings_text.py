"""The warnings block that ``run``, ``report``, ``explain`` and ``sign`` print on stderr."""

from __future__ import annotations

from collections.abc import Iterable

from ..warnings import Warning

__all__ = ["warnings_text"]

_ORDER = {"error": 0, "warning": 1, "note": 2}


def warnings_text(ws: Iterable[Warning]) -> str:
    """The warnings, most severe first, one line each (``""`` when there are none).

    Parameters
    ----------
    ws : iterable of budget.warnings.Warning

    Returns
    -------
    str
        A heading with the counts by severity, then ``severity [code] input: message`` lines
        (errors first, then warnings, then notes; the record's order within a severity).
    """
    ws = sorted(ws, key=lambda w: _ORDER[w.severity])
    if not ws:
        return ""
    counts = {s: sum(w.severity == s for w in ws) for s in ("error", "warning", "note")}
    head = ", ".join(f"{n} {s}{'' if n == 1 else 's'}" for s, n in counts.items() if n)
    out = [f"Warnings ({head}):"]
    out += [f"  {w.line()}" for w in ws]
    return "\n".join(out)
