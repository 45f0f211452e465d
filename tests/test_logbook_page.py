"""The logbook trend page's layout: nothing past the right margin, no table row split across
pages, the step flag dated by the recalibration interval, u beside the means before and after,
a caution on a chain mean across a flagged step. Source: the page's own A4 geometry as laid out
by weasyprint (its box tree; an open reference library) — the checks are geometric."""

from __future__ import annotations

import pytest

from budget.logbook import compute_trend
from budget.logbook.store import Series, SeriesRow


def _season() -> Series:
    """Two chains, 40 runs, long titles; A's resistor shifts by −0.7 at cert-2; A's voltmeter is
    recalibrated one run after it (so its own test is cut and not tested). Invented."""
    rows, cals = [], []
    for i in range(20):
        day = f"2027-{1 + i // 2:02d}-{5 + 12 * (i % 2):02d}"
        for ch in ("A", "B"):
            rid = len(rows) + 1
            v = -0.7 if (ch == "A" and i >= 10) else 0.0
            rows.append(SeriesRow(rid, f"{day}T{'10' if ch == 'A' else '15'}:00",
                                  f"{day}T{'12' if ch == 'A' else '17'}:00", ch,
                                  f"pump run through chain {ch} on {day}, a long title (invented)",
                                  "ppm", v, 0.2, 0.4, 2.0))
            cert = ("CCC certificate KB-R-2027-06 of a long name (invented)" if i >= 10 else
                    "CCC certificate KB-R-2026-12 of a long name (invented)")
            cals.append((rid, "R" if ch == "A" else "A_TR", "typed in", "",
                         cert if ch == "A" else "amplifier certificate (invented)", "", ""))
            cals.append((rid, "g", "typed in", "", "Josephson calibration KB-JV-2027-06 (invented)"
                         if i >= 11 else "Josephson calibration KB-JV-2026-12 (invented)", "", ""))
    return Series("dev_ppm", tuple(rows), 0, (), tuple(cals))


@pytest.fixture(scope="module")
def laid_out():
    weasyprint = pytest.importorskip("weasyprint")
    from budget.report.trend_render import trend_html
    t = compute_trend(_season())
    html = trend_html(t)
    return t, html, weasyprint.HTML(string=html).render()


def test_nothing_past_the_right_margin_and_no_row_split(laid_out):
    from weasyprint.formatting_structure import boxes
    _t, _html, doc = laid_out
    assert len(doc.pages) >= 2
    over, pages_of_row = [], {}
    for i, page in enumerate(doc.pages):
        pb = page._page_box
        right = pb.margin_width() - pb.margin_right - pb.padding_right
        for bx in pb.descendants():
            if isinstance(bx, boxes.TextBox) and bx.position_x + bx.width > right + 0.5:
                over.append(bx.text)
            if isinstance(bx, boxes.TableRowBox):
                pages_of_row.setdefault(bx.element, set()).add(i)
    assert over == []
    assert [r for r, p in pages_of_row.items() if len(p) > 1] == []


def test_page_content(laid_out):
    t, html, _doc = laid_out
    step = [f for f in t.flags if f.kind == "step"][0]
    # the flag's dates are the recalibration interval: the last cert-1 run ends 2027-05-17
    # 12:00, the first cert-2 run starts 2027-06-05 10:00
    assert (step.date_from, step.date_to) == ("2027-05-17T12:00", "2027-06-05T10:00")
    assert "2027-05-17 to 2027-06-05" in html
    s = [s for s in t.steps if s.flagged][0]
    assert f"({s.before.n})" in html and " ± " in html
    assert "Caution, A:" in html and "flagged step" in t.chains[0].caution
    assert any(f.kind == "step not tested" for f in t.flags)
