"""The suite's numeric comparisons carry no hidden absolute tolerance (issue 18).

``pytest.approx`` defaults to ``abs=1e-12``, the very scale of this project's quantities (pump
errors 1e-10 ... 1e-13, currents 1e-10 A, fractional frequencies 1e-14), so a relative check on
such a value silently accepts anything within 1e-12. Every comparison goes through
``numeric.near`` (absolute tolerance 0 unless stated); this file refuses an ``approx(`` call
without ``abs=`` anywhere in the tests.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest
from numeric import near

TESTS = Path(__file__).parent


def _approx_calls_without_abs(source: str) -> list[int]:
    lines = []
    for node in ast.walk(ast.parse(source)):
        if not isinstance(node, ast.Call):
            continue
        f = node.func
        name = f.attr if isinstance(f, ast.Attribute) else getattr(f, "id", None)
        if name == "approx" and not any(k.arg == "abs" for k in node.keywords):
            lines.append(node.lineno)
    return lines


def test_no_approx_without_explicit_abs_in_the_tests():
    offenders = []
    for path in sorted(TESTS.glob("*.py")):
        for line in _approx_calls_without_abs(path.read_text(encoding="utf-8")):
            offenders.append(f"{path.name}:{line}")
    assert not offenders, "approx( without abs= (use numeric.near): " + ", ".join(offenders)


def test_the_check_itself_finds_a_bare_approx():
    # the refusal above must be able to fail: a bare call is found, a call with abs= is not
    assert _approx_calls_without_abs("x == pytest.approx(1e-13, rel=1e-6)\n") == [1]
    assert _approx_calls_without_abs("x == approx(1e-13)\n") == [1]
    assert _approx_calls_without_abs("x == pytest.approx(1e-13, rel=1e-6, abs=0)\n") == []


def test_near_has_no_absolute_floor_at_the_pump_scale():
    # 9.4e-14 is the size of the cascade's deviation (derivation: tests/test_pump_cascade.py);
    # the naive value 0 or a 10x error must not pass a 1e-6 relative check
    assert 0.0 != near(9.4e-14, rel=1e-6)
    assert 9.4e-13 != near(9.4e-14, rel=1e-6)
    assert 9.4e-14 * (1 + 5e-7) == near(9.4e-14, rel=1e-6)
    # an explicit absolute tolerance is honoured where a value may be 0
    assert 1e-20 == near(0.0, abs=1e-18)
    with pytest.raises(AssertionError):
        assert 1e-17 == near(0.0, abs=1e-18)
