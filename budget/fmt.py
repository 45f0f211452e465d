"""Rounding and number formatting shared by the terminal tables and the report.

The GUM's rule (JCGM 100 §7.2.6): state uncertainties to at most two significant digits and
round the estimate to the same decimal place. Records keep full precision; only renderers round.
"""

from __future__ import annotations

import math

__all__ = ["round_pair", "fmt_u", "fmt_value", "fmt_num", "fmt_dof", "fmt_share", "fmt_rows",
           "with_u", "plain"]


def _exp10(x: float) -> int:
    return math.floor(math.log10(abs(x))) if x != 0 and math.isfinite(x) else 0


def fmt_u(u: float, sig: int = 2) -> str:
    """An uncertainty to ``sig`` significant digits (default 2), e.g. ``0.0083`` or ``3.2e-17``."""
    if u is None or not math.isfinite(u):
        return "∞" if u is not None and u > 0 else "–"
    if u == 0:
        return "0"
    e = _exp10(u)
    if -3 <= e <= 5:
        places = sig - 1 - e                       # negative: round to tens, hundreds, ...
        if places < 0:
            # JCGM 100 §7.2.6: at most two significant digits, also when u >= 100 (161 -> 160)
            return f"{round(u, places):.0f}"
        return f"{round(u, places):.{places}f}"
    return f"{u:.{sig - 1}e}"


def fmt_value(y: float, u: float, sig: int = 2) -> str:
    """The estimate rounded to the decimal place of its uncertainty's last significant digit.

    JCGM 100 §7.2.6: y = 3·10⁻⁵ with U = 0.49 is ``0.00``, not ``3e-05``. Fixed-point whenever
    that place is between 10⁻⁹ and 10⁹ (and |y| < 10¹⁰); otherwise exponent form to the same
    place. An estimate that rounds to zero there takes u's form: ``0.00`` beside u = ``0.49``,
    ``0.0e-08`` beside u = ``1.7e-08`` (which :func:`fmt_u` prints in exponent form).
    """
    if not math.isfinite(y):
        return str(y)
    if u is None or not math.isfinite(u) or u == 0:
        return fmt_num(y, 10)
    eu = _exp10(u)
    last = eu - sig + 1                            # decimal exponent of u's last digit
    ey = _exp10(y) if y != 0 else last
    if round(y / 10.0 ** last) == 0 and not -3 <= eu <= 5:
        return f"{0:.{sig - 1}f}e{eu:+03d}"       # beside u in exponent form (fmt_u): 0.0e-08
    if ey <= 9 and -9 <= last:
        r = round(y, -last) + 0.0                  # + 0.0: no "-0.00" for a value rounding to 0
        return f"{r:.{max(-last, 0)}f}"
    digits = max(ey - last + 1, 1)
    return f"{y:.{digits - 1}e}"


def round_pair(y: float, u: float, sig: int = 2) -> tuple[str, str]:
    """``(value, uncertainty)`` both rounded per the GUM's rule."""
    return fmt_value(y, u, sig), fmt_u(u, sig)


def fmt_num(x: float, sig: int = 4) -> str:
    """A general number to ``sig`` significant digits."""
    if x is None:
        return "–"
    if not math.isfinite(x):
        return "∞" if x > 0 else ("−∞" if x < 0 else "NaN")
    if x == 0:
        return "0"
    e = _exp10(x)
    if -3 <= e <= 5:
        return f"{x:.{max(sig - 1 - e, 0)}f}"
    return f"{x:.{sig - 1}e}"


def fmt_dof(nu: float | None) -> str:
    """Degrees of freedom: ``∞`` for infinite, integers without decimals, else one decimal."""
    if nu is None or math.isinf(nu):
        return "∞"
    if nu >= 1e4:  # effectively infinite; the exact digits carry no information
        return f"{nu:.1e}"
    if abs(nu - round(nu)) < 1e-6:
        return str(int(round(nu)))
    return f"{nu:.1f}"


def fmt_share(s: float) -> str:
    """A share of u_c² as a percentage with one decimal."""
    return f"{100 * s:.1f} %"


def _parse_ranges(rows: str) -> list[tuple[int, int]] | None:
    out = []
    for part in rows.split(","):
        part = part.strip()
        if not part:
            continue
        a, sep, b = part.partition("-")
        try:
            lo, hi = int(a), int(b) if sep else int(a)
        except ValueError:
            return None
        out.append((lo, hi))
    return out


def fmt_rows(rows: str, max_ranges: int = 4) -> str:
    """Row ranges for a reader: as stored when short, summarised when long.

    Parameters
    ----------
    rows : str
        Row ranges as a :class:`budget.quantity.FileRef` stores them (``"37-100, 137-200"``,
        1-based, header excluded).
    max_ranges : int
        Up to this many ranges are listed as they are (with an en dash). Default 4.

    Returns
    -------
    str
        ``"rows 37–100, 137–200"``; for more ranges a summary: with ranges of equal length at a
        fixed spacing ``"rows 37–100 of each block of 100 (180 blocks, rows 37–17 999);
        11 520 rows used; every range in the record"``, otherwise the first and last range,
        the number of ranges and of rows used. Text that is not a list of ranges is
        returned unchanged.
    """
    ranges = _parse_ranges(rows) if rows else None
    if not ranges:
        return rows
    dash = lambda a, b: f"{a}–{b}" if b > a else f"{a}"  # noqa: E731
    if len(ranges) <= max_ranges:
        return "rows " + ", ".join(dash(a, b) for a, b in ranges)
    used = sum(b - a + 1 for a, b in ranges)
    n_used = f"{used:,}".replace(",", "\u202f")
    lengths = {b - a for a, b in ranges}
    steps = {ranges[i + 1][0] - ranges[i][0] for i in range(len(ranges) - 1)}
    if len(lengths) == 1 and len(steps) == 1:
        step = steps.pop()
        a0, b0 = ranges[0]
        first = a0 - (a0 - 1) // step * step if step > 0 else a0   # offset within a block
        lead = f"rows {dash(first, first + b0 - a0)} of each block of {step}"
        return (f"{lead} ({len(ranges)} blocks, rows {dash(a0, ranges[-1][1])}); "
                f"{n_used} rows used; every range in the record")
    return (f"rows in {len(ranges)} ranges from {dash(*ranges[0])} to {dash(*ranges[-1])}; "
            f"{n_used} rows used; every range in the record")


def with_u(x: float, u: float | None) -> str:
    """``x`` with digits chosen from its uncertainty ``u``: to the place of u's second
    significant digit (JCGM 100 §7.2.6), so a correction of 0.45·10⁻⁶ on a ratio near 1 shows;
    without a usable ``u`` ten significant digits (the record keeps full precision)."""
    if not isinstance(x, float) or not math.isfinite(x):
        return plain(x)
    if u is None or not isinstance(u, (int, float)) or not math.isfinite(u) or u <= 0:
        return f"{x:.10g}"
    places = 1 - math.floor(math.log10(u))
    if 0 <= places <= 16 and (1e-3 <= abs(x) < 1e9 or x == 0):
        return f"{x:.{places}f}"
    digits = max(math.floor(math.log10(abs(x))) - math.floor(math.log10(u)) + 2, 2) \
        if x != 0 else 2
    return f"{x:.{min(digits, 17) - 1}e}"


def plain(v: object) -> str:
    """A diagnostic value in words: no raw None/True/False (an auditor reads "not computed",
    "yes", "no"); floats to ten significant digits."""
    if v is None:
        return "not computed"
    if v is True:
        return "yes"
    if v is False:
        return "no"
    if isinstance(v, float):
        if not math.isfinite(v):
            return "∞" if v > 0 else ("−∞" if v < 0 else "not a number")
        return f"{v:.10g}"
    return str(v)
