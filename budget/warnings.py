"""Structured warnings: findings that can change what a number means.

A module, the engine or a cross-check that finds something the user must know about (a
prediction extrapolated past the last calibration, a covariance inflated by a Birge ratio, a
default chosen for the user, a settling transient, a glitch, a plateau that disagrees with the
spec's ``n``, a degenerate fit) returns a :class:`Warning` instead of (or besides) a free-text
note. The engine collects every warning into :attr:`budget.result.Budget.warnings`; the record
carries them as its top-level ``warnings`` list; every command that shows a budget prints them
on stderr after the table; ``budget sign`` refuses a record with an ``"error"`` warning unless
``--accept-warnings`` is given.

How to emit one
---------------
* From an input module: ``warn("settle.transient", "…", severity="warning")`` and put it in
  ``ModuleResult(warnings=(...))`` or in a quantity's ``Provenance(warnings=(...))``. Leave
  ``input`` empty; the engine fills in the ``[inputs.NAME]`` the module ran for.
* From the engine or a cross-check: give ``input`` (or ``""`` for the whole run).

Severities
----------
``"note"``
    Worth knowing; the number means what it says (e.g. a default chosen for the user).
``"warning"``
    The number may not mean what the user assumes (extrapolation, inflation, a transient the
    test detects, a glitch); read it before signing.
``"error"``
    The tool is not sure the number can be used (e.g. ``settle_policy = "refuse"`` met a
    transient only as a warning would, a degenerate fit); ``sign`` refuses without
    ``--accept-warnings``.

Codes are dotted lower-case words (``history.extrapolation``, ``cycles.transient``); a code is
stable once released so that scripts and the logbook can filter on it.
"""

from __future__ import annotations

import re
from collections.abc import Iterable
from dataclasses import dataclass, replace
from typing import Any

__all__ = ["Warning", "SEVERITIES", "warn", "with_input", "unique", "errors_of",
           "warnings_from_list"]

SEVERITIES = ("note", "warning", "error")
_CODE = re.compile(r"^[a-z][a-z0-9_]*(\.[a-z0-9_]+)*$")


@dataclass(frozen=True)
class Warning:  # noqa: A001 - the record's word; import it as ``from budget.warnings import warn``
    """One structured warning of a budget.

    Parameters
    ----------
    code : str
        Stable dotted identifier, e.g. ``"cycles.transient"``.
    input : str
        The ``[inputs.NAME]`` it concerns, or ``""`` for the run as a whole.
    severity : str
        ``"note"``, ``"warning"`` or ``"error"`` (see the module docstring).
    message : str
        One or two sentences for the user, with the numbers that matter and what to do.
    """

    code: str
    input: str
    severity: str
    message: str

    def __post_init__(self) -> None:
        if self.severity not in SEVERITIES:
            raise ValueError(f"severity must be one of {SEVERITIES}; got {self.severity!r}")
        if not _CODE.match(self.code):
            raise ValueError(f"warning code must be dotted lower-case words; got {self.code!r}")
        if not self.message:
            raise ValueError("a warning needs a message")

    def to_dict(self) -> dict[str, Any]:
        return {"code": self.code, "input": self.input, "severity": self.severity,
                "message": self.message}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> Warning:
        return cls(code=str(d["code"]), input=str(d.get("input", "")),
                   severity=str(d.get("severity", "warning")), message=str(d["message"]))

    def line(self) -> str:
        """The one-line form the commands print: ``warning [cycles.transient] dV: …``."""
        where = f"{self.input}: " if self.input else ""
        return f"{self.severity} [{self.code}] {where}{self.message}"


def warn(code: str, message: str, *, severity: str = "warning", input: str = "") -> Warning:
    """Make a :class:`Warning` (keyword arguments keep call sites readable)."""
    return Warning(code=code, input=input, severity=severity, message=message)


def with_input(ws: Iterable[Warning], name: str) -> tuple[Warning, ...]:
    """The warnings with an empty ``input`` attributed to ``name``."""
    return tuple(w if w.input else replace(w, input=name) for w in ws)


def unique(ws: Iterable[Warning]) -> tuple[Warning, ...]:
    """Drop exact repeats, keep the first order."""
    seen: set[Warning] = set()
    out = []
    for w in ws:
        if w not in seen:
            seen.add(w)
            out.append(w)
    return tuple(out)


def errors_of(ws: Iterable[Warning]) -> tuple[Warning, ...]:
    """The warnings of severity ``"error"``."""
    return tuple(w for w in ws if w.severity == "error")


def warnings_from_list(items: Any) -> tuple[Warning, ...]:
    """Read a record's ``warnings`` list (already shape-checked by :mod:`budget.record`)."""
    return tuple(Warning.from_dict(d) for d in (items or ()))
