"""One checked conversion for every number read from a spec, a CSV, a record or an argument.

A number the tool accepts must be a real number (a boolean is not one), finite, representable
as a float64 (a 400-digit integer is not, even though TOML and JSON allow it) and inside the
range its meaning allows (a probability in (0, 1), a half-width >= 0 ...). :func:`checked`
applies all four checks and raises :class:`NumberError` with a message of the form "must be
...; got ...", which the caller locates (file, line or row, field) in its own error class.

:func:`shown` gives the short, escaped text of a bad value for such messages, so that a
400-digit integer or a string with a line break cannot make an error message long or split it.

Overflow in a computation is a separate matter: :func:`overflow_checked` evaluates a float
expression and raises NumberError instead of returning inf or raising OverflowError.
"""

from __future__ import annotations

import math
import numbers
import sys
from collections.abc import Callable
from typing import Any

__all__ = ["NumberError", "checked", "checked_int", "is_number", "shown", "overflow_checked",
           "escape", "FLOAT_MAX"]

FLOAT_MAX = sys.float_info.max                 # 1.797...e308, the largest float64
_SHOWN_MAX = 60                                # characters of a bad value shown in a message


class NumberError(ValueError):
    """A value that is not an acceptable number; ``str()`` completes "FIELD ..."."""


def escape(text: str) -> str:
    """``text`` with control and line-separator characters shown as escapes (``\\n``, ``\\x1b``),
    as :func:`repr` would, but without quotes: a field name printed in a one-line message must
    not break that line."""
    out = []
    for ch in str(text):
        if ch.isprintable() or ch == " ":
            out.append(ch)
        else:
            out.append(repr(ch)[1:-1])
    return "".join(out)


def shown(v: Any, limit: int = _SHOWN_MAX) -> str:
    """A short, single-line ``repr`` of ``v`` for a message (a huge integer by its digit count)."""
    if isinstance(v, int) and not isinstance(v, bool) and abs(v) > 10 ** 30:
        return f"an integer of {len(str(abs(v)))} digits"
    try:
        text = repr(v)
    except Exception:  # noqa: BLE001 - a hostile __repr__ must not break the message
        text = f"<{type(v).__name__}>"
    text = escape(text)
    return text if len(text) <= limit else text[: limit - 1] + "…"


def _is_bool(v: Any) -> bool:
    # numpy's bool scalar is no numbers.Real, but test by name so that numpy is not imported
    return isinstance(v, bool) or type(v).__name__ in ("bool_", "bool")


def is_number(v: Any) -> bool:
    """True for an int or float that is not a bool (numpy scalars included)."""
    return isinstance(v, numbers.Real) and not _is_bool(v)


def checked(v: Any, *, lo: float | None = None, hi: float | None = None,
            lo_open: bool = False, hi_open: bool = False,
            accept: Callable[[float], bool] | None = None, must: str = "") -> float:
    """``v`` as a finite float64 inside [lo, hi] (ends open with ``lo_open``/``hi_open``).

    Parameters
    ----------
    v : Any
        The value as read (int, float, numpy scalar; anything else is refused).
    lo, hi : float, optional
        Bounds of the meaning (a probability, a positive width ...). Default unbounded.
    lo_open, hi_open : bool
        Exclude the bound itself. Default False.
    accept : callable, optional
        A further test on the float; ``must`` then says what it demands.
    must : str
        Completes "must be ..." for the range message. Default: built from the bounds.

    Raises
    ------
    NumberError
        Not a number, not finite, too large for a float, or out of range.
    """
    if not is_number(v):
        raise NumberError(f"must be a number; got {shown(v)}")
    try:
        x = float(v)
    except OverflowError:
        raise NumberError(f"is too large to be represented (a float holds at most "
                          f"{FLOAT_MAX:.3g}); got {shown(v)}") from None
    if not math.isfinite(x):
        raise NumberError(f"must be a finite number; got {shown(v)}")
    bad = ((lo is not None and (x < lo or (lo_open and x == lo)))
           or (hi is not None and (x > hi or (hi_open and x == hi)))
           or (accept is not None and not accept(x)))
    if bad:
        raise NumberError(f"must be {must or _range_words(lo, hi, lo_open, hi_open)}; "
                          f"got {shown(v)}")
    return x


def checked_int(v: Any, *, lo: int | None = None, hi: int | None = None, must: str = "") -> int:
    """``v`` as an integer inside [lo, hi] (a float with an integral value is not accepted:
    a count or a seed written as 1e3 is most likely a mistake)."""
    if _is_bool(v) or not isinstance(v, numbers.Integral):
        raise NumberError(f"must be an integer; got {shown(v)}")
    n = int(v)
    if (lo is not None and n < lo) or (hi is not None and n > hi):
        raise NumberError(f"must be {must or _range_words(lo, hi, False, False)}; got {shown(n)}")
    return n


def _range_words(lo, hi, lo_open, hi_open) -> str:
    if lo is not None and hi is not None:
        return f"in {'(' if lo_open else '['}{lo:g}, {hi:g}{')' if hi_open else ']'}"
    if lo is not None:
        return f"{'>' if lo_open else '>='} {lo:g}"
    if hi is not None:
        return f"{'<' if hi_open else '<='} {hi:g}"
    return "a finite number"


def overflow_checked(compute: Callable[[], Any], what: str,
                     fail: Callable[[str], Exception] | None = None) -> Any:
    """Run ``compute`` with numpy overflow and invalid operations raising.

    A result that is not finite, or an OverflowError or FloatingPointError, becomes
    ``fail(message)`` (a located BudgetError made by the caller), or NumberError when ``fail``
    is None. The message says that WHAT overflows a float.
    """
    import numpy as np  # lazily: the CLI's argument checks must not import numpy
    message = None
    try:
        with np.errstate(over="raise", invalid="raise"):
            out = compute()
    except (OverflowError, FloatingPointError, ZeroDivisionError):
        message = (f"{what} overflows a float (largest {FLOAT_MAX:.3g}); "
                   "check the magnitudes")
    else:
        if not _all_finite(out):
            message = f"{what} is not finite; check the magnitudes"
    if message is not None:
        raise (fail or NumberError)(message)
    return out


def _all_finite(out: Any) -> bool:
    """Every number in ``out`` (a number, an array, or tuples/lists of them; None skipped)
    is finite."""
    if out is None:
        return True
    if isinstance(out, (tuple, list)):
        return all(_all_finite(x) for x in out)
    import numpy as np
    try:
        return bool(np.all(np.isfinite(np.asarray(out, dtype=float))))
    except (TypeError, ValueError, OverflowError):
        return False
