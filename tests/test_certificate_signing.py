"""A certificate draft carries DRAFT until it is signed (issue 5 item 3): ``budget sign`` signs
the final certificate rendered from the reviewed draft's own record, and refuses another record.

The source of the rule is the issue's contract; the PDF text is read back with pypdf, an
independent reader.
"""

from __future__ import annotations

import io

import pypdf
import pytest

from budget.cli import main
from budget.references import spec_path


def _text(pdf_path) -> str:
    reader = pypdf.PdfReader(io.BytesIO(pdf_path.read_bytes()))
    return "\n".join(page.extract_text() for page in reader.pages)


@pytest.fixture(scope="module")
def signed_setup(tmp_path_factory):
    d = tmp_path_factory.mktemp("cert")
    mp = pytest.MonkeyPatch()
    mp.setenv("BUDGET_PASSPHRASE", "correct horse battery")
    spec = spec_path("ea402_s3")
    assert main(["run", str(spec), "--no-monte-carlo", "--json", str(d / "r.json")]) == 0
    assert main(["run", str(spec_path("gum_h2")), "--json", str(d / "other.json")]) == 0
    assert main(["report", "--record", str(d / "r.json"), "--certificate",
                 "-o", str(d / "draft.pdf")]) == 0
    assert main(["identity", "create", "--name", "Approver (invented)", "--out",
                 str(d / "id")]) == 0
    yield d, spec, mp
    mp.undo()


def test_draft_signed_as_final_certificate(signed_setup, capsys):
    d, spec, _ = signed_setup
    assert "DRAFT" in _text(d / "draft.pdf")
    assert main(["sign", str(d / "draft.pdf"), "--identity", str(d / "id" / "identity.p12"),
                 "--record", str(d / "r.json"), "--spec", str(spec),
                 "-o", str(d / "signed.pdf")]) == 0
    text = _text(d / "signed.pdf")
    assert "DRAFT" not in text
    assert "10000.178" in text      # the same result (EA-4/02 S3: R_X = 10 000.178 Ω)
    # the Authorisation block's Date row is filled with the signing day (UTC) (issue 13)
    import datetime as dt
    today = dt.datetime.now(dt.UTC).date().isoformat()
    assert f"Date {today}" in " ".join(text.split())
    capsys.readouterr()
    assert main(["verify", str(d / "signed.pdf"), "--trust", str(d / "id" / "identity.pem")]) == 0


def test_draft_refuses_another_record(signed_setup, capsys):
    d, _, _ = signed_setup
    code = main(["sign", str(d / "draft.pdf"), "--identity", str(d / "id" / "identity.p12"),
                 "--record", str(d / "other.json"), "--spec", str(spec_path("gum_h2")),
                 "-o", str(d / "wrong.pdf")])
    err = capsys.readouterr().err
    assert code == 2 and "not the one the certificate draft was rendered from" in err
    assert not (d / "wrong.pdf").exists()
