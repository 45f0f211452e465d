"""One exception hierarchy for everything the library refuses.

Every error knows *where* the problem is (file, row or line, field) so that the CLI can print one
line of the form ``file:line: field: message`` and exit with code 2, without a traceback.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable

__all__ = [
    "BudgetError",
    "SpecError",
    "DataError",
    "ModelError",
    "ComputationError",
    "UsageError",
    "did_you_mean",
]


class BudgetError(Exception):
    """Base class of all errors raised on bad input or impossible requests.

    Parameters
    ----------
    message : str
        What is wrong, phrased for the user ("must be positive; got -3").
    file : str, optional
        The file the problem is in (as the user named it).
    row : int, optional
        1-based data row of a table (header excluded), when the problem is in a data file.
    line : int, optional
        1-based line of a text file (spec), when known.
    field : str, optional
        The key, column or construct at fault.
    """

    def __init__(self, message: str, *, file: str | None = None, row: int | None = None,
                 line: int | None = None, field: str | None = None):
        super().__init__(message)
        self.message = message
        self.file = None if file is None else str(file)
        self.row = row
        self.line = line
        self.field = field

    def located(self, *, file: str | None = None, row: int | None = None,
                line: int | None = None, field: str | None = None) -> BudgetError:
        """Fill in location details that are still unknown and return ``self``."""
        if self.file is None and file is not None:
            self.file = str(file)
        if self.row is None and row is not None:
            self.row = row
        if self.line is None and line is not None:
            self.line = line
        if self.field is None and field is not None:
            self.field = field
        return self

    def one_line(self) -> str:
        """The message as a single line: ``file:line N: field 'x': message``."""
        from .numbers import escape  # names and fields may hold line breaks: show them escaped
        parts = []
        where = escape(self.file or "")
        if self.line is not None:
            where += f":{self.line}" if where else f"line {self.line}"
        if self.row is not None:
            where += f": row {self.row}" if where else f"row {self.row}"
        if where:
            parts.append(where)
        if self.field:
            parts.append(f"field '{escape(self.field)}'")
        # line breaks that format a long message become spaces; any other control character
        # (inside a quoted name, say) is shown escaped
        parts.append(escape(" ".join(str(self.message).split())))
        return ": ".join(parts)

    def __str__(self) -> str:  # pragma: no cover - trivial
        return self.one_line()


class SpecError(BudgetError):
    """The budget spec (TOML) is malformed or inconsistent."""


class DataError(BudgetError):
    """A data file (CSV, fit result, calibration history) is malformed."""


class ModelError(BudgetError):
    """A model expression is not allowed or cannot be evaluated."""


class ComputationError(BudgetError):
    """A computation could not produce a trustworthy number (no convergence, singular matrix)."""


class UsageError(BudgetError):
    """Command-line arguments that do not fit together."""


def did_you_mean(word: str, choices: Iterable[str]) -> str:
    """Return ``"; did you mean 'x'?"`` for the closest choice, or ``""`` when none is close."""
    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.6)
    return f"; did you mean '{close[0]}'?" if close else ""
