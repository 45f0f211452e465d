"""Dimension check of the model: every expression evaluated on dimensions before propagation.

A dimension is a vector of exponents of the seven SI base quantities (:data:`budget.units.BASES`,
from pint), or ``None`` when it is not known (a typed-in input without ``unit``, a spec
constant given as a plain number). The rules are those of quantity calculus (SI Brochure,
9th ed., §5.4): ``+``/``-`` need equal dimensions, ``*``/``/`` add/subtract exponents, an
exponent is dimensionless and, on a quantity with a dimension, a constant; ``exp``, ``log``,
trigonometric and hyperbolic functions need a dimensionless argument; ``sqrt`` halves the
exponents. An unknown dimension matches anything and makes the result unknown where it must.

The check runs once on the trees (no numbers); propagation is untouched.
"""

from __future__ import annotations

from collections.abc import Mapping
from fractions import Fraction

from . import expression as ex
from .errors import ModelError
from .units import DIMENSIONLESS, dim_text

__all__ = ["Dims", "infer", "BUILTIN_UNITS"]

Dims = tuple[Fraction, ...] | None

#: Units of the built-in constants of :data:`budget.model.BUILTIN_CONSTANTS`.
BUILTIN_UNITS = {"pi": "1", "e": "C", "h": "J s", "k_B": "J/K", "R_K": "Ω", "K_J": "Hz/V"}

_SAME = frozenset({"abs"})
_DIMENSIONLESS_FNS = frozenset(ex.FUNCTIONS) - _SAME - {"sqrt", "sign"}


class DimensionError(ModelError):
    """A model expression that combines quantities of different dimensions."""


def _const(node: ex.Node) -> float | None:
    """The value of a tree of numbers only (None when it has a name)."""
    if isinstance(node, ex.Num):
        return node.value
    if isinstance(node, ex.Neg):
        v = _const(node.a)
        return None if v is None else -v
    if isinstance(node, ex.Bin):
        a, b = _const(node.a), _const(node.b)
        if a is None or b is None:
            return None
        try:
            return {"+": a + b, "-": a - b, "*": a * b, "/": a / b if b else None,
                    "**": a ** b if a > 0 else None}[node.op]
        except (OverflowError, ZeroDivisionError):
            return None
    return None


def infer(node: ex.Node, env: Mapping[str, Dims], *, where: str, file: str | None = None,
          line: int | None = None) -> Dims:
    """The dimension of ``node`` over ``env`` (name -> dimension or None).

    Raises
    ------
    DimensionError
        On a mismatch, naming ``where`` (the output), the sub-expression and both dimensions.
    """
    def fail(sub: ex.Node, message: str) -> DimensionError:
        return DimensionError(f"dimension mismatch in {ex.to_text(sub)!r}: {message}",
                              file=file, line=line, field=where)

    def go(n: ex.Node) -> Dims:
        if isinstance(n, ex.Num):
            return DIMENSIONLESS
        if isinstance(n, ex.Var):
            return env.get(n.name)
        if isinstance(n, ex.Neg):
            return go(n.a)
        if isinstance(n, ex.Call):
            d = go(n.arg)
            if n.fn in _SAME:
                return d
            if n.fn == "sign":
                return DIMENSIONLESS
            if n.fn == "sqrt":
                return None if d is None else tuple(x / 2 for x in d)
            if d is not None and d != DIMENSIONLESS:
                raise fail(n, f"{n.fn}() needs a dimensionless argument; got {dim_text(d)}")
            return DIMENSIONLESS
        if isinstance(n, ex.Bin):
            a, b = go(n.a), go(n.b)
            if n.op in "+-":
                if a is not None and b is not None and a != b:
                    raise fail(n, f"{dim_text(a)} {n.op} {dim_text(b)}")
                return a if a is not None else b
            if n.op == "*":
                return None if a is None or b is None else tuple(x + y for x, y in zip(a, b))
            if n.op == "/":
                return None if a is None or b is None else tuple(x - y for x, y in zip(a, b))
            # power
            if b is not None and b != DIMENSIONLESS:
                raise fail(n, f"an exponent must be dimensionless; got {dim_text(b)}")
            if a is None or a == DIMENSIONLESS:
                return a
            p = _const(n.b)
            if p is None:
                raise fail(n, f"a quantity of dimension {dim_text(a)} can only be raised to "
                              "a constant power")
            q = Fraction(p).limit_denominator(1000)
            return tuple(x * q for x in a)
        raise fail(n, "unknown node")  # pragma: no cover
    return go(node)
