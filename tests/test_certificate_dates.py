"""Dates on the certificate: the Authorisation date, and the dates checked against each other.

ISO/IEC 17025:2017 §7.8.2.1 i (date of performance) and j (date of issue), clause letters from
memory; the order "measured ≤ issued" and "measured ≤ signed" is common practice (a result
cannot be issued or authorised before it was measured). Dates below are invented.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import replace

from budget import evaluate, parse_spec
from budget.report import render_html
from budget.report.dates import check_dates, dates_in

D = dt.date


def test_dates_are_read_from_free_text():
    assert dates_in("2026-11-19 20:00 to 2026-11-20 00:02") == [D(2026, 11, 19), D(2026, 11, 20)]
    assert dates_in("19 November 2026") == []          # not ISO 8601: not checked
    assert dates_in("2026-02-30") == []                 # no such day


def test_signing_after_the_stated_issue_date_is_flagged():
    rep = {"measurement_date": "2026-11-19 to 2026-11-20", "issue_date": "2026-11-23"}
    f = check_dates(rep, D(2026, 12, 3))
    assert not f.errors
    assert len(f.warnings) == 1 and "later than the stated date of issue 2026-11-23" in f.warnings[0]
    assert check_dates(rep, D(2026, 11, 23)) == check_dates(rep)   # same day: nothing to say


def test_signing_or_issue_before_the_measurement_is_an_error():
    rep = {"measurement_date": "2026-11-19 to 2026-11-20", "issue_date": "2026-11-18"}
    f = check_dates(rep, D(2026, 11, 19))
    assert any("date of issue 2026-11-18 is earlier" in e for e in f.errors)
    assert any("signing date 2026-11-19 is earlier than the date of measurement 2026-11-20" in e
               for e in f.errors)
    assert check_dates({}, D(2000, 1, 1)).errors == ()  # nothing stated: nothing checked


def test_final_certificate_carries_the_signing_date():
    b = evaluate(parse_spec('[budget]\ntitle = "dates (invented)"\n[model]\nY = "A"\n'
                            '[inputs.A]\nvalue = 1\nstandard_uncertainty = 0.1\n'),
                 monte_carlo_enabled=False)
    b = replace(b, run={**b.run, "report": {"approver": "A. Approver (invented)"}})
    final = render_html(b, certificate=True, draft=False, figures=False,
                        signing_date="2026-12-03")
    block = final[final.index('id="signature-block"'):]
    assert "<td>Date</td><td>2026-12-03</td>" in block
    draft = render_html(b, certificate=True, figures=False)
    assert "<td>Date</td><td><div class=\"line\"></div></td>" in draft
