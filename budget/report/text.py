"""Typography of numbers already rounded by :mod:`budget.fmt` (no rounding happens here).

``1.2e-08`` becomes ``1.2×10⁻⁸``, a hyphen-minus before a digit becomes the minus sign U+2212,
``10^-6`` in a label becomes ``10⁻⁶``. Used by the templates (as jinja filters) and by the figures.
"""

from __future__ import annotations

import math
import re

from ..fmt import fmt_dof, fmt_num, fmt_share, fmt_u, fmt_value

__all__ = ["sci", "superscript", "pretty_label", "value_u", "unit_suffix", "MINUS"]

MINUS = "\u2212"
_SUP = str.maketrans("0123456789-+", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻⁺")
_E = re.compile(r"(?<![A-Za-z_])(-?\d+(?:\.\d*)?)e([+-]?)(\d+)\b")
_CARET = re.compile(r"10\^(?:\(([+-]?\d+)\)|([+-]?\d+))")


def superscript(text: str) -> str:
    """Digits and signs as superscripts: ``"-8"`` -> ``"⁻⁸"``."""
    return text.translate(_SUP)


def sci(text: str) -> str:
    """E-notation to ``×10ⁿ`` and leading minus signs to U+2212, in a formatted number.

    >>> sci("-1.2e-08")
    '−1.2×10⁻⁸'
    """
    def repl(m: re.Match) -> str:
        exp = int(m.group(2) + m.group(3))
        return f"{m.group(1)}×10{superscript(str(exp))}"
    out = _E.sub(repl, str(text))
    return re.sub(r"(^|[\s(\[±,;=])-(?=\d)", lambda m: m.group(1) + MINUS, out)


def pretty_label(text: str) -> str:
    """A figure label or title: ``10^-6`` or ``10^(-6)`` -> ``10⁻⁶``; nothing else changes.

    >>> pretty_label("ΔR/R (10^-6)")
    'ΔR/R (10⁻⁶)'
    """
    return _CARET.sub(lambda m: "10" + superscript(str(int(m.group(1) or m.group(2)))),
                      str(text))


def unit_suffix(unit: str) -> str:
    """`` Ω`` for a unit, empty for a dimensionless quantity ("" or "1")."""
    return f" {unit}" if unit and unit != "1" else ""


def value_u(value: float, u: float) -> str:
    """The estimate rounded to the place of u's second significant digit, typeset."""
    return sci(fmt_value(value, u))


# jinja filters: each takes the raw float and returns display text
FILTERS = {
    "u": lambda x: sci(fmt_u(x)),
    "num": lambda x, sig=4: sci(fmt_num(x, sig)),
    "dof": fmt_dof,
    "share": fmt_share,
    "sci": sci,
    "pct": lambda p: f"{100 * p:g} %",
    "isfinite": lambda x: x is not None and math.isfinite(x),
}
