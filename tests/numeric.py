"""The suite's one numeric comparison: ``near(expected, rel=..., abs=...)``.

Why not ``pytest.approx`` directly: its default absolute tolerance is 1e-12, and this project
works at exactly that scale (pump errors of 1e-10 ... 1e-13, currents of 1e-10 A, fractional
frequencies of 1e-14). ``approx(9.4e-14, rel=1e-6)`` accepts anything within 1e-12 of 9.4e-14,
i.e. it would pass a value wrong by 1000 %. ``near`` makes the absolute tolerance explicit and
defaults it to 0, so a relative tolerance means what it says at every scale. Where a value can
be 0 (so a relative tolerance is meaningless), give ``abs=`` with its reason, or compare in scaled
units (× 1e-6, pA).

``tests/test_numeric_helper.py`` refuses any ``approx(`` call without ``abs=`` in the test files.
"""

from __future__ import annotations

import pytest

__all__ = ["near"]


def near(expected, rel: float = 1e-6, abs: float = 0.0):  # noqa: A002 - same name as pytest's
    """Comparison object for ``actual == near(expected, ...)``.

    Parameters
    ----------
    expected : float or array-like or mapping
        The reference value(s), same shapes as ``pytest.approx`` accepts.
    rel : float, default 1e-6
        Relative tolerance (fraction of ``expected``).
    abs : float, default 0.0
        Absolute tolerance, in the units of ``expected``. Default 0: no hidden floor.
    """
    return pytest.approx(expected, rel=rel, abs=abs)
