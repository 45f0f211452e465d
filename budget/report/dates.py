"""The dates a certificate states, checked against each other and against the signing date.

ISO/IEC 17025:2017 §7.8.2.1 asks for the date(s) of performance (i) and the date of issue (j);
the Authorisation block carries the date the approver signed. The [report] fields are free
text, so the dates are read as the ISO 8601 calendar dates (``YYYY-MM-DD``) they contain; a
field without one is not checked.
"""

from __future__ import annotations

import datetime as _dt
import re
from dataclasses import dataclass

__all__ = ["DateFindings", "check_dates", "dates_in"]

_DATE = re.compile(r"(?<!\d)(\d{4})-(\d{2})-(\d{2})(?!\d)")


def dates_in(text: str) -> list[_dt.date]:
    """The valid ``YYYY-MM-DD`` dates in ``text``, in the order written (invalid ones skipped)."""
    out = []
    for m in _DATE.finditer(text or ""):
        try:
            out.append(_dt.date(int(m.group(1)), int(m.group(2)), int(m.group(3))))
        except ValueError:
            continue
    return out


@dataclass(frozen=True)
class DateFindings:
    """What the dates say. ``errors`` make signing meaningless; ``warnings`` are flagged.

    Attributes
    ----------
    errors : tuple of str
    warnings : tuple of str
    """

    errors: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, list[str]]:
        return {"errors": list(self.errors), "warnings": list(self.warnings)}


def check_dates(report: dict[str, str], signing_date: _dt.date | None = None) -> DateFindings:
    """Check the measurement date, the date of issue and the signing date against each other.

    Parameters
    ----------
    report : dict
        The record's ``run.report`` fields (``measurement_date``, ``issue_date``).
    signing_date : datetime.date, optional
        The day of signing (UTC). Default: not checked.

    Returns
    -------
    DateFindings
        Errors: the signing date precedes the (last) date of measurement; the date of issue
        precedes it. Warnings: the signing date is later than the stated date of issue (the
        certificate would state an issue date before its authorisation).
    """
    errors, warnings = [], []
    measured = dates_in(report.get("measurement_date", ""))
    issued = dates_in(report.get("issue_date", ""))
    last = max(measured) if measured else None
    issue = issued[0] if issued else None
    if last and issue and issue < last:
        errors.append(f"the date of issue {issue} is earlier than the date of measurement "
                      f"{last} ([report] issue_date, measurement_date)")
    if signing_date is not None:
        if last and signing_date < last:
            errors.append(f"the signing date {signing_date} is earlier than the date of "
                          f"measurement {last} ([report] measurement_date)")
        if issue and signing_date > issue:
            warnings.append(f"the signing date {signing_date} is later than the stated date of "
                            f"issue {issue} ([report] issue_date); the certificate states an "
                            "issue date before its authorisation: correct issue_date and render "
                            "the draft again, or record the reason under the laboratory's "
                            "procedures")
    return DateFindings(tuple(errors), tuple(warnings))
