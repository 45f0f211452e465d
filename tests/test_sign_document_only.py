"""Signing needs only the document (issue 13 item 7): a report or certificate draft made by
``budget report`` from a spec carries its record and spec as PDF attachments, so
``budget sign REPORT.pdf --identity ID.p12 -o SIGNED.pdf`` works with nothing else, and the
signed file verifies and re-runs from its inputs.

Sources: the attachments are read back with pypdf (an independent PDF library; ISO 32000-1
§7.11.4 embedded file streams, (memory)); the spec digest is recomputed with hashlib (FIPS 180-4
SHA-256); the expected result of the evidence spec is not needed — the check is that the record
carried is byte for byte the one the signing step embeds and the re-run reproduces it.
"""

from __future__ import annotations

import hashlib
import io
import json

import pypdf
import pytest
from evidence_helpers import PASSPHRASE, write_spec_folder

from budget import cli


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    root = tmp_path_factory.mktemp("signonly")
    spec = write_spec_folder(root / "lab")
    mp = pytest.MonkeyPatch()
    mp.setenv("BUDGET_PASSPHRASE", PASSPHRASE)
    assert cli.main(["identity", "create", "--name", "Ada Quill (invented)", "--out",
                     str(root / "id")]) == 0
    assert cli.main(["report", str(spec), "-o", str(root / "report.pdf")]) == 0
    assert cli.main(["report", str(spec), "--certificate", "-o", str(root / "draft.pdf")]) == 0
    assert cli.main(["run", str(spec), "--json", str(root / "r.json")]) == 0
    assert cli.main(["report", "--record", str(root / "r.json"), "-o",
                     str(root / "from_record.pdf")]) == 0
    yield root, spec
    mp.undo()


def _attachments(path) -> dict[str, bytes]:
    reader = pypdf.PdfReader(io.BytesIO(path.read_bytes()))
    return {name: data[0] for name, data in reader.attachments.items()}


def test_report_from_spec_carries_record_and_spec(made):
    root, spec = made
    att = _attachments(root / "report.pdf")
    assert att["budget-spec.toml"] == spec.read_bytes()          # exactly the file's bytes
    rec = json.loads(att["budget-record.json"])
    assert rec["run"]["spec_sha256"] == hashlib.sha256(spec.read_bytes()).hexdigest()


@pytest.mark.parametrize("name", ["report.pdf", "draft.pdf"])
def test_sign_with_the_document_alone_then_verify_inputs(made, name, capsys):
    root, spec = made
    out = root / f"signed-{name}"
    assert cli.main(["sign", str(root / name), "--identity", str(root / "id" / "identity.p12"),
                     "-o", str(out)]) == 0
    capsys.readouterr()
    # verify re-runs the embedded spec on the input files and compares the records
    assert cli.main(["verify", str(out), "--trust", str(root / "id" / "identity.pem"),
                     "--inputs", str(spec.parent)]) == 0
    said = capsys.readouterr().out
    assert "recomputed record: identical" in said and "1 input file(s)" in said
    assert _attachments(out)["budget-spec.toml"] == spec.read_bytes()


def test_report_from_record_needs_only_the_spec(made, capsys):
    root, spec = made
    att = _attachments(root / "from_record.pdf")
    assert att["budget-record.json"] == (root / "r.json").read_bytes()
    assert "budget-spec.toml" not in att
    out = root / "signed-from-record.pdf"
    code = cli.main(["sign", str(root / "from_record.pdf"), "--identity",
                     str(root / "id" / "identity.p12"), "-o", str(out)])
    err = capsys.readouterr().err
    assert code == 2 and "carries no spec" in err and "give --spec" in err
    assert not out.exists()
    assert cli.main(["sign", str(root / "from_record.pdf"), "--identity",
                     str(root / "id" / "identity.p12"), "--spec", str(spec), "-o",
                     str(out)]) == 0


def test_another_record_than_the_carried_one_is_refused(made, capsys):
    root, spec = made
    other = root / "other.json"
    assert cli.main(["run", str(spec), "--seed", "7", "--json", str(other)]) == 0
    capsys.readouterr()
    out = root / "signed-other.pdf"
    code = cli.main(["sign", str(root / "report.pdf"), "--identity",
                     str(root / "id" / "identity.p12"), "--record", str(other), "--spec",
                     str(spec), "-o", str(out)])
    assert code == 2 and "already carries a different budget-record.json" in \
        capsys.readouterr().err
    assert not out.exists()
