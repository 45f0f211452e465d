"""Source-file rows in the report: long lists of row ranges are summarised.

The report lists where every number came from; a file read in 145 regular blocks must not
fill pages with row numbers (issue 13). The full list stays in the record. Expected texts
below are derived by hand from the ranges given.
"""

from __future__ import annotations

import io
import re
from pathlib import Path

import pypdf

from budget import evaluate, load_spec
from budget.fmt import fmt_rows
from budget.report import render_html, render_pdf_layout

EXAMPLES = Path(__file__).resolve().parents[1] / "worked_examples"
RANGE = re.compile(r"\b\d+\s*[–-]\s*\d+\b")


def test_short_lists_are_kept():
    assert fmt_rows("1-7") == "rows 1–7"
    assert fmt_rows("2, 4-9") == "rows 2, 4–9"
    assert fmt_rows("") == ""
    assert fmt_rows("not ranges") == "not ranges"


def test_regular_blocks_are_summarised():
    # 180 blocks of 100 rows, rows 37–100 of each used: 180·64 = 11 520 rows (derivation)
    rows = ", ".join(f"{100 * i + 37}-{100 * i + 100}" for i in range(180))
    text = fmt_rows(rows)
    assert text.startswith("rows 37–100 of each block of 100 (180 blocks, rows 37–18000)")
    assert "11\u202f520 rows used" in text and "record" in text
    assert len(RANGE.findall(text)) <= 2


def test_irregular_lists_are_summarised():
    rows = "1-5, 8, 10-12, 20-30, 40"        # 5 + 1 + 3 + 11 + 1 = 21 rows (derivation)
    text = fmt_rows(rows)
    assert text == "rows in 5 ranges from 1–5 to 40; 21 rows used; every range in the record"


def test_no_report_page_carries_more_than_a_few_lines_of_row_numbers():
    # the amplifier chain reads a 4 h on/off record in 145 segments (worked example)
    b = evaluate(load_spec(EXAMPLES / "amplifier_chain" / "spec.toml"),
                 monte_carlo_enabled=False)
    assert any(len(f.rows) > 1000 for q in b.inputs for f in q.provenance.files)  # stored in full
    pdf = render_pdf_layout(render_html(b, figures=False)).pdf
    for i, page in enumerate(pypdf.PdfReader(io.BytesIO(pdf)).pages, 1):
        text = page.extract_text() or ""
        busy = [ln for ln in text.splitlines() if len(RANGE.findall(ln)) >= 3]
        assert len(busy) <= 3, (i, busy[:5])
