"""Fixtures shared by the signing, archive, interruption and determinism tests.

The spec and the calibration table below are invented test data (no real instrument or lab);
they only have to exercise a data-file input whose digest ends up in the record.
"""

from __future__ import annotations

import io
from pathlib import Path

SPEC = """\
[budget]
title = "Evidence test budget (invented numbers)"

[model]
V = "g * Vr"

[monte_carlo]
trials = 2000
seed = 20261201

[inputs.Vr]
value = 0.1
standard_uncertainty = 1e-8
unit = "V"

[inputs.g]
module = "voltmeter"
file = "data/cal.csv"
fit = "origin"
working_voltage_V = 0.1
"""

# invented readings of a voltmeter against a Josephson reference, a few µV/V off unity
CAL_CSV = """\
reference_V,reading_V
1.0,1.0000012
2.0,2.0000021
5.0,5.0000062
-1.0,-1.0000009
-2.0,-2.0000023
"""

PASSPHRASE = "invented passphrase 4711"


def write_spec_folder(folder: Path, spec: str = SPEC, cal: str = CAL_CSV) -> Path:
    """Write spec.toml and data/cal.csv into ``folder``; return the spec's path."""
    (folder / "data").mkdir(parents=True, exist_ok=True)
    (folder / "data" / "cal.csv").write_text(cal, encoding="utf-8")
    p = folder / "spec.toml"
    p.write_text(spec, encoding="utf-8")
    return p


def make_pdf(text: str = "Calibration report (invented)", *, pages: int = 1,
             info: dict[str, str] | None = None) -> bytes:
    """A small A4 PDF written with pyHanko's own writer (fast; no HTML renderer needed).

    Each page shows ``text`` in an uncompressed content stream, so a test can find its bytes.
    ``info`` adds document-information entries (e.g. the report renderer's signature box).
    """
    from pyhanko.pdf_utils import generic
    from pyhanko.pdf_utils.writer import PageObject, PdfFileWriter

    w = PdfFileWriter()
    font = generic.DictionaryObject({
        generic.pdf_name("/Type"): generic.pdf_name("/Font"),
        generic.pdf_name("/Subtype"): generic.pdf_name("/Type1"),
        generic.pdf_name("/BaseFont"): generic.pdf_name("/Helvetica")})
    res = generic.DictionaryObject({generic.pdf_name("/Font"): generic.DictionaryObject(
        {generic.pdf_name("/F1"): w.add_object(font)})})
    for i in range(pages):
        content = f"BT /F1 14 Tf 72 770 Td ({text} - page {i + 1}) Tj ET".encode("latin-1")
        stream = generic.StreamObject(stream_data=content)
        # A4 is 210 mm x 297 mm = 595.28 pt x 841.89 pt (ISO 216; 1 pt = 1/72 in)
        page = PageObject(contents=w.add_object(stream), media_box=(0, 0, 595.28, 841.89),
                          resources=res)
        w.insert_page(page)
    if info:
        w.set_info(generic.DictionaryObject({generic.pdf_name("/" + k): generic.TextStringObject(v)
                                             for k, v in info.items()}))
    out = io.BytesIO()
    w.write(out)
    return out.getvalue()
