"""Rounding of stated uncertainties and estimates for display.

Rule checked: JCGM 100:2008 §7.2.6 — an uncertainty is stated with at most two significant
digits and the estimate is rounded to the same decimal place.  The expected strings are the
rule applied by hand to each input.
"""
from budget.fmt import fmt_u, fmt_value


def test_two_significant_digits_below_one():
    assert fmt_u(0.00834) == "0.0083"          # 8.34e-3 -> two digits


def test_two_significant_digits_between_ten_and_hundred():
    assert fmt_u(12.3) == "12"


def test_two_significant_digits_at_and_above_hundred():
    # found in review: 161 used to be printed with three digits beside a value rounded to tens
    assert fmt_u(161.0) == "160"
    assert fmt_u(1234.0) == "1200"
    assert fmt_u(47_000.0) == "47000"


def test_value_rounded_to_the_last_digit_of_u():
    # u = 161 -> 160, last significant digit in the tens: 1 000 000 004 -> 1 000 000 000
    assert fmt_value(1_000_000_004.0, 161.0) == "1000000000"
    assert fmt_value(10.01634, 0.0083) == "10.0163"   # u's last digit at 1e-4
