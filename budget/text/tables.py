"""Layout shared by the text renderers: a column table and a label column.

Both return strings; widths are counted in code points (the renderers' symbols such as ν, ±
and … are one column wide in a terminal).
"""

from __future__ import annotations

import textwrap

__all__ = ["LABEL", "WIDTH", "grouped_table", "section", "table", "unit_suffix"]

LABEL = 20          # width of the label column of a fixed-section answer, in characters
WIDTH = 100         # a fixed-section answer fits a 100-column terminal


def table(headers: list[str], rows: list[list[str]], right: set[int] | None = None) -> str:
    """A table with a header line, a dashed rule and one line per row.

    Parameters
    ----------
    headers : list of str
        Column headings.
    rows : list of list of str
        Cells, already formatted; every row has one cell per heading.
    right : set of int, optional
        Indices of right-aligned columns. Default: every column but the first.

    Returns
    -------
    str
        The lines joined by newlines (no trailing newline). Columns are as wide as their
        widest cell or heading and are separated by two spaces; cells are padded, so lines
        may end in spaces.
    """
    right = right if right is not None else set(range(1, len(headers)))
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h)
              for i, h in enumerate(headers)]

    def line(cells):
        return "  ".join(c.rjust(w) if i in right else c.ljust(w)
                         for i, (c, w) in enumerate(zip(cells, widths)))
    out = [line(headers), "  ".join("-" * w for w in widths)]
    out += [line(r) for r in rows]
    return "\n".join(out)


def grouped_table(headers: list[str], groups: list[tuple[str, list[list[str]]]],
                  right: set[int] | None = None, indent: str = "  ") -> str:
    """A :func:`table` whose rows come in groups, each under its own sub-heading line.

    Parameters
    ----------
    headers : list of str
        Column headings.
    groups : list of (str, list of list of str)
        ``(sub-heading, rows)``; the columns are as wide as the widest cell of any group.
    right : set of int, optional
        Right-aligned columns. Default: every column but the first.
    indent : str
        Put before every row (not the sub-headings), so the rows read as under them.
        Default two spaces.

    Returns
    -------
    str
        Heading line, dashed rule, then per group its sub-heading and its indented rows.
    """
    right = right if right is not None else set(range(1, len(headers)))
    rows = [r for _, rs in groups for r in rs]
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h)
              for i, h in enumerate(headers)]

    def line(cells):
        return "  ".join(c.rjust(w) if i in right else c.ljust(w)
                         for i, (c, w) in enumerate(zip(cells, widths))).rstrip()
    out = [indent + line(headers), indent + "  ".join("-" * w for w in widths)]
    for heading, rs in groups:
        out.append(heading)
        out += [indent + line(r) for r in rs]
    return "\n".join(out)


def section(label: str, text: str) -> list[str]:
    """``text`` wrapped beside ``label`` in a :data:`LABEL`-character label column.

    Parameters
    ----------
    label : str
        Shown on the first line only; the continuation lines leave the column blank.
    text : str
        Wrapped to :data:`WIDTH` − :data:`LABEL` characters; its own newlines start new
        paragraphs (under a blank label). Hyphenated words are not broken.

    Returns
    -------
    list of str
        The lines, without trailing spaces; an empty ``text`` gives one line (the label).
    """
    out = []
    for k, para in enumerate(str(text).split("\n")):
        lines = textwrap.wrap(para, WIDTH - LABEL, break_on_hyphens=False) or [""]
        for j, ln in enumerate(lines):
            head = label if (k == 0 and j == 0) else ""
            out.append(f"{head:<{LABEL}}{ln}".rstrip())
    return out


def unit_suffix(unit: str) -> str:
    """``" Ω"`` after a number for a unit; empty for a dimensionless one (``""`` or ``"1"``)."""
    return f" {unit}" if unit not in ("", "1") else ""
