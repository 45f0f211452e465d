"""Rounding and number formatting shared by the terminal tables and the report.

The GUM's rule (JCGM 100 §7.2.6): state uncertainties to at most two significant digits and
round the estimate to the same decimal place. Records keep full precision; only renderers round.
"""

from __future__ import annotations

import math

__all__ = ["round_pair", "fmt_u", "fmt_value", "fmt_num", "fmt_dof", "fmt_share"]


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
        decimals = max(sig - 1 - e, 0)
        return f"{round(u, decimals):.{decimals}f}"
    return f"{u:.{sig - 1}e}"


def fmt_value(y: float, u: float, sig: int = 2) -> str:
    """The estimate rounded to the decimal place of its uncertainty's last significant digit."""
    if not math.isfinite(y):
        return str(y)
    if u is None or not math.isfinite(u) or u == 0:
        return fmt_num(y, 10)
    last = _exp10(u) - sig + 1                     # decimal exponent of u's last digit
    if y == 0:
        return "0"
    ey = _exp10(y) if y != 0 else last
    digits = max(ey - last + 1, 1)
    if -4 <= ey <= 9 and -9 <= last <= 0:
        return f"{round(y, -last):.{-last}f}"
    if -4 <= ey <= 9 and 0 < last:
        return f"{round(y, -last):.0f}"
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
