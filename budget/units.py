"""Physical units: one application registry (pint), resolved once to scale factors.

A unit string from a spec or a data file is parsed by :mod:`pint` into a :class:`Unit`: the
factor and offset that take a number in that unit to the coherent SI unit of its dimension
(``SI = value * scale + offset``; the offset is non-zero only for ``°C``), the SI unit's symbol
and the dimension as a vector of exponents of the seven base quantities. Propagation never sees
pint: inputs are converted to SI when they are read, model dimensions are checked on the
vectors (:mod:`budget.dimensions`), and a display unit is one more factor on an output.

Spellings accepted besides pint's own: ``µ``/``μ``/``u`` for micro, ``Ω``/``ohm``, ``°C``/``degC``,
``""`` and ``"1"`` for dimensionless, and for relative quantities the powers of ten
``10⁻⁶``/``×10⁻⁶``/``1e-6``/``10^-6`` (likewise ⁻⁸, ⁻⁹), ``µA/A``, ``nA/A`` and ``ppm`` (an alias of
10⁻⁶ accepted as input only; the SI Brochure, 9th ed., §5.4.7, advises against it).

The registry's defining constants are pint's SI 2019 values (``e``, ``h``, ``k_B`` exact), the
same numbers as :data:`budget.model.BUILTIN_CONSTANTS` (checked in tests/test_units.py).
"""

from __future__ import annotations

import difflib
import math
import re
from dataclasses import dataclass
from fractions import Fraction
from functools import cache, lru_cache

__all__ = ["Unit", "UnitError", "parse_unit", "registry", "BASES", "DIMENSIONLESS", "dim_text",
           "si_symbol", "display_factor", "COMMON"]

#: The seven base dimensions, in pint's names (order of :attr:`Unit.dims`).
BASES = ("[length]", "[mass]", "[time]", "[current]", "[temperature]", "[substance]",
         "[luminosity]")
_BASE_SYMBOL = ("L", "M", "T", "I", "Θ", "N", "J")
DIMENSIONLESS: tuple[Fraction, ...] = (Fraction(0),) * 7

#: Coherent SI units with a special name, preferred when a dimension is shown.
_PREFERRED = ("V", "A", "Ω", "Hz", "K", "s", "C", "W", "J", "F", "S", "kg", "m", "J/K", "J s",
              "Hz/V", "V/A", "A/V", "V/Hz", "Wb", "T", "mol", "N", "Pa")

#: Spellings practitioners type, offered in did-you-mean messages.
COMMON = ("V", "mV", "µV", "uV", "nV", "A", "mA", "µA", "uA", "nA", "pA", "fA", "Ω", "ohm",
          "kΩ", "kohm", "MΩ", "Mohm", "GΩ", "Gohm", "Hz", "kHz", "MHz", "GHz", "s", "ms", "h",
          "K", "mK", "°C", "degC", "C", "1", "ppm", "µA/A", "nA/A", "10⁻⁶", "10⁻⁸", "10⁻⁹",
          "J", "W", "F", "kg", "g", "mg", "m", "rad")

_SUPERSCRIPT = str.maketrans("⁰¹²³⁴⁵⁶⁷⁸⁹⁻", "0123456789-")
_POWER = re.compile(r"^(?:×\s*)?10\s*(?:\^|\*\*)?\s*(-?\d+)$|^1e(-?\d+)$")


class UnitError(ValueError):
    """A unit string pint cannot read, or one used where its dimension does not fit."""


@dataclass(frozen=True)
class Unit:
    """A parsed unit, resolved to numbers once.

    Attributes
    ----------
    text : str
        As written.
    scale, offset : float
        A number x in this unit is ``x * scale + offset`` in the coherent SI unit; ``offset`` is
        0 except for offset scales (°C). Differences (uncertainties) convert with ``scale`` only.
    si : str
        Symbol of the coherent SI unit of the dimension ("1" when dimensionless).
    dims : tuple of Fraction
        Exponents of the base dimensions :data:`BASES`.
    """

    text: str
    scale: float
    offset: float
    si: str
    dims: tuple[Fraction, ...]

    @property
    def is_offset(self) -> bool:
        return self.offset != 0.0

    @property
    def dimensionless(self) -> bool:
        return self.dims == DIMENSIONLESS

    def to_si(self, x: float) -> float:
        """An absolute value in this unit, in SI."""
        return x * self.scale + self.offset

    def label(self) -> str:
        """How to show a number stated in this unit ("" when it is plain dimensionless 1)."""
        return "" if self.text in ("", "1") else self.text


@lru_cache(maxsize=1)
def registry():
    """The application's pint registry (created once, on first use)."""
    import pint
    reg = pint.UnitRegistry(autoconvert_offset_to_baseunit=False)
    return reg


def _dims_of(dimensionality) -> tuple[Fraction, ...]:
    return tuple(Fraction(dimensionality.get(b, 0)).limit_denominator(1000) for b in BASES)


def dim_text(dims: tuple[Fraction, ...] | None) -> str:
    """A dimension for a message: its SI unit and its base exponents, e.g. ``V (L² M T⁻³ I⁻¹)``."""
    if dims is None:
        return "unknown"
    if dims == DIMENSIONLESS:
        return "dimensionless (1)"
    sup = str.maketrans("0123456789-/", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻ᐟ")
    parts = []
    for s, p in zip(_BASE_SYMBOL, dims):
        if p:
            parts.append(s if p == 1 else s + str(p).translate(sup))
    return f"{si_symbol(dims)} ({' '.join(parts)})"


@cache
def _preferred() -> dict[tuple[Fraction, ...], str]:
    out: dict[tuple[Fraction, ...], str] = {d: _FAST_SI.get(s, s) for s, d in _FAST.items()
                                            if s not in ("", "1", "rad", "ohm")}
    reg = registry()
    for sym in _PREFERRED:
        q = reg.Quantity(1.0, _pint_text(sym))
        out.setdefault(_dims_of(q.dimensionality), sym)
    return out


def si_symbol(dims: tuple[Fraction, ...]) -> str:
    """The coherent SI unit of a dimension: a named one (V, Ω, Hz, ...) or base units."""
    if dims == DIMENSIONLESS:
        return "1"
    fast = {d: _FAST_SI.get(s, s) for s, d in _FAST.items() if s not in ("", "1", "rad")}
    named = fast.get(dims) or _preferred().get(dims)
    if named:
        return named
    base = ("m", "kg", "s", "A", "K", "mol", "cd")
    num = [b if p == 1 else f"{b}^{p}" for b, p in zip(base, dims) if p > 0]
    den = [b if p == -1 else f"{b}^{-p}" for b, p in zip(base, dims) if p < 0]
    return (" ".join(num) or "1") + ("/" + (" ".join(den) if len(den) == 1 else
                                            "(" + " ".join(den) + ")") if den else "")


def _pint_text(text: str) -> str:
    t = text.strip().replace("μ", "µ").replace("Ω", "ohm").replace("°C", "degC")
    return t


def parse_unit(text: str) -> Unit:
    """Parse a unit string once (results are cached).

    Raises
    ------
    UnitError
        When pint cannot read it; the message has a did-you-mean from :data:`COMMON`.
    """
    if not isinstance(text, str):
        raise UnitError(f"a unit must be a string; got {text!r}")
    return _parse(text.strip())


def _d(L=0, M=0, T=0, I=0, Th=0) -> tuple[Fraction, ...]:  # noqa: E741, N803
    return tuple(Fraction(x) for x in (L, M, T, I, Th, 0, 0))


#: Coherent SI symbols resolved without loading pint (a second of start-up); each entry is
#: checked against pint in tests/test_units.py. Everything else goes to pint.
_FAST = {"": _d(), "1": _d(), "rad": _d(), "V": _d(2, 1, -3, -1), "A": _d(I=1),
         "Ω": _d(2, 1, -3, -2), "ohm": _d(2, 1, -3, -2), "Hz": _d(T=-1), "s": _d(T=1),
         "K": _d(Th=1), "C": _d(T=1, I=1), "kg": _d(M=1), "m": _d(1), "W": _d(2, 1, -3),
         "J": _d(2, 1, -2), "F": _d(-2, -1, 4, 2)}
_FAST_SI = {"": "1", "1": "1", "rad": "1", "ohm": "Ω"}


@lru_cache(maxsize=512)
def _parse(text: str) -> Unit:
    try:
        return _parse_plain(text)
    except _Unreadable as exc:
        raise UnitError(f"unknown unit {text!r}{_suggest(text)}") from exc.__cause__


class _Unreadable(Exception):
    """pint could not read a unit string (the caller words the message)."""


def _parse_plain(text: str) -> Unit:
    # no did-you-mean here: _suggest tries candidates through this function, and a candidate
    # must never ask for suggestions of its own (a typo such as "µVolt" recursed forever)
    if text in _FAST:
        return Unit(text, 1.0, 0.0, _FAST_SI.get(text, text), _FAST[text])
    m = _POWER.match(text.translate(_SUPERSCRIPT).replace(" ", ""))
    if m:
        p = int(m.group(1) or m.group(2))
        return Unit(text, float(f"1e{p}"), 0.0, "1", DIMENSIONLESS)
    reg = registry()
    import pint
    try:
        unit = reg.Unit(_pint_text(text))
    except Exception as exc:  # pint raises several kinds on nonsense input
        raise _Unreadable(text) from exc
    dims = _dims_of(unit.dimensionality)
    offset = 0.0
    q1 = reg.Quantity(1.0, unit)
    q0 = reg.Quantity(0.0, unit)
    try:
        base1 = q1.to_base_units().magnitude
        base0 = q0.to_base_units().magnitude
    except pint.errors.OffsetUnitCalculusError:  # pragma: no cover - defensive
        raise UnitError(f"cannot convert {text!r} to SI") from None
    if base0 != 0.0:
        offset = float(base0)
    scale = float(base1 - base0)
    # a named SI unit of the same dimension: pint's base units are kg, m, s, A, ... so the
    # factor to the named unit (V, Ω) is the same number; keep powers of ten exact
    scale = _exact_power_of_ten(scale)
    if not (math.isfinite(scale) and scale > 0):
        raise UnitError(f"unit {text!r} has no positive finite factor to SI")
    return Unit(text, scale, offset, si_symbol(dims), dims)


def _exact_power_of_ten(x: float) -> float:
    """Round a factor that is a power of ten up to float error to that power exactly."""
    if x > 0:
        p = round(math.log10(x))
        exact = float(f"1e{p}")
        if abs(x - exact) <= 4e-16 * exact:
            return exact
    return x


def display_factor(working: Unit, shown: Unit) -> float:
    """Factor from a number in ``working`` to the same quantity in ``shown`` (same dimension)."""
    return _exact_power_of_ten(working.scale / shown.scale)


def _suggest(text: str) -> str:
    low = {c.lower(): c for c in COMMON}
    hits = [low[c] for c in difflib.get_close_matches(text.lower(), list(low), n=3, cutoff=0.6)]
    if text.lower().startswith("u") or text.lower().startswith("µ"):
        micro = ["µ" + text[1:].upper() if len(text) == 2 else "µ" + text[1:],
                 "u" + (text[1:].upper() if len(text) == 2 else text[1:])]
        hits = [h for h in micro if _ok(h)] + [h for h in hits if h not in micro]
    hits = list(dict.fromkeys(h for h in hits if h != text))[:3]
    if not hits:
        return " (SI symbols with prefixes, e.g. µV, nA, GΩ, MHz, K, °C; \"1\" for none)"
    return " (did you mean " + " or ".join(hits) + "?)"


def _ok(text: str) -> bool:
    try:
        _parse_plain(text)
    except (UnitError, _Unreadable):
        return False
    return True
