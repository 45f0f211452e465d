"""Evidence archives (issue 6, items 5-6): content addressing, manifest, recomputation, and
loss-free writing.

External references: objects are named by their SHA-256 (FIPS 180-4), recomputed here with
Python's hashlib; the archive must let the same budget be recomputed byte for byte, which is
checked by re-running the restored spec through the engine.
"""

from __future__ import annotations

import hashlib
import json

import pytest
from evidence_helpers import write_spec_folder

from budget import archive as ar
from budget import cli
from budget.engine import evaluate
from budget.errors import DataError, UsageError
from budget.recompute import recompute
from budget.spec import load_spec


@pytest.fixture()
def lab(tmp_path):
    spec_path = write_spec_folder(tmp_path / "lab")
    spec = load_spec(spec_path)
    return spec_path, spec, evaluate(spec)


def _leftovers(folder):
    return sorted(p.name for p in folder.iterdir() if p.name.endswith((".part", ".old")))


def test_archive_layout_and_digests(lab, tmp_path):
    spec_path, spec, budget = lab
    info = ar.archive(spec, budget, tmp_path / "arch")
    root = tmp_path / "arch"
    m = json.loads((root / "manifest.json").read_text("utf-8"))
    assert m["schema"] == ar.ARCHIVE_SCHEMA
    cal = (spec_path.parent / "data" / "cal.csv").read_bytes()
    assert m["files"] == [{"path": "data/cal.csv", "sha256": hashlib.sha256(cal).hexdigest(),
                           "size": len(cal)}]
    assert m["spec"]["sha256"] == hashlib.sha256(spec_path.read_bytes()).hexdigest()
    # every object is named by the SHA-256 of its bytes (content addressing)
    for obj in (root / "objects").iterdir():
        assert hashlib.sha256(obj.read_bytes()).hexdigest() == obj.name
    assert (root / "record.json").read_text("utf-8") == budget.to_json()
    assert m["record"]["sha256"] == hashlib.sha256((root / "record.json").read_bytes()).hexdigest()
    assert info.files == (("data/cal.csv", hashlib.sha256(cal).hexdigest()),)
    assert _leftovers(tmp_path) == []


def test_archive_is_deterministic(lab, tmp_path):
    """No timestamps: the same budget archived twice gives identical manifests."""
    spec_path, spec, budget = lab
    ar.archive(spec, budget, tmp_path / "a1")
    ar.archive(spec, budget, tmp_path / "a2")
    assert (tmp_path / "a1" / "manifest.json").read_bytes() == \
        (tmp_path / "a2" / "manifest.json").read_bytes()


def test_restore_and_recompute_byte_identical(lab, tmp_path):
    spec_path, spec, budget = lab
    ar.archive(spec, budget, tmp_path / "arch")
    restored = ar.restore(tmp_path / "arch", tmp_path / "restored")
    assert (restored.parent / "data" / "cal.csv").read_bytes() == \
        (spec_path.parent / "data" / "cal.csv").read_bytes()
    again = evaluate(load_spec(restored)).to_json()
    assert again == budget.to_json()
    c = ar.read_archive(tmp_path / "arch")
    chk = recompute(c.spec_bytes, c.record_json, c.manifest, restored.parent)
    assert chk.ok and chk.record_identical and [f.status for f in chk.files] == ["same"]


def test_recompute_names_the_changed_file(lab, tmp_path):
    spec_path, spec, budget = lab
    ar.archive(spec, budget, tmp_path / "arch")
    restored = ar.restore(tmp_path / "arch", tmp_path / "restored")
    cal = restored.parent / "data" / "cal.csv"
    cal.write_text(cal.read_text("utf-8").replace("2.0000021", "2.0000031"), encoding="utf-8")
    c = ar.read_archive(tmp_path / "arch")
    chk = recompute(c.spec_bytes, c.record_json, c.manifest, restored.parent)
    assert not chk.ok and not chk.record_identical
    assert [f.status for f in chk.files] == ["changed"]
    assert any("data/cal.csv" in p for p in chk.problems)
    assert any("measurands[0]" in d for d in chk.differences)


def test_corrupted_object_detected(lab, tmp_path):
    spec_path, spec, budget = lab
    ar.archive(spec, budget, tmp_path / "arch")
    cal_digest = hashlib.sha256((spec_path.parent / "data" / "cal.csv").read_bytes()).hexdigest()
    obj = tmp_path / "arch" / "objects" / cal_digest
    obj.write_bytes(obj.read_bytes().replace(b"1.0000012", b"1.0000013"))
    with pytest.raises(DataError, match="no longer matches"):
        ar.read_archive(tmp_path / "arch")


def test_input_changed_after_the_run_is_refused(lab, tmp_path):
    spec_path, spec, budget = lab
    cal = spec_path.parent / "data" / "cal.csv"
    cal.write_text(cal.read_text("utf-8") + "3.0,3.0000031\n", encoding="utf-8")
    with pytest.raises(DataError, match="changed since the budget read it"):
        ar.archive(spec, budget, tmp_path / "arch")
    assert not (tmp_path / "arch").exists() and _leftovers(tmp_path) == []


def test_never_overwritten_without_force(lab, tmp_path):
    spec_path, spec, budget = lab
    ar.archive(spec, budget, tmp_path / "arch")
    with pytest.raises(UsageError, match="--force-archive"):
        ar.archive(spec, budget, tmp_path / "arch")
    ar.archive(spec, budget, tmp_path / "arch", force=True)
    assert ar.is_archive(tmp_path / "arch") and _leftovers(tmp_path) == []
    # a folder that is not an archive is never replaced, not even with force
    other = tmp_path / "photos"
    other.mkdir()
    (other / "keep.txt").write_text("mine", encoding="utf-8")
    with pytest.raises(UsageError, match="not a budget archive"):
        ar.archive(spec, budget, other, force=True)
    assert (other / "keep.txt").read_text("utf-8") == "mine"


def test_interrupted_archive_leaves_nothing(lab, tmp_path, monkeypatch):
    spec_path, spec, budget = lab
    real = ar._write

    def interrupt(path, data):
        if path.name == "manifest.json":  # the very last file: everything else is written
            raise KeyboardInterrupt
        real(path, data)
    monkeypatch.setattr(ar, "_write", interrupt)
    with pytest.raises(KeyboardInterrupt):
        ar.archive(spec, budget, tmp_path / "arch")
    assert not (tmp_path / "arch").exists() and _leftovers(tmp_path) == []


def test_file_outside_the_spec_folder(tmp_path):
    """A data file named '../shared/cal.csv' is archived with that path and restored inside
    the destination so the same relative path reaches it."""
    from evidence_helpers import CAL_CSV, SPEC
    (tmp_path / "shared").mkdir()
    (tmp_path / "shared" / "cal.csv").write_text(CAL_CSV, encoding="utf-8")
    (tmp_path / "lab").mkdir()
    spec_path = tmp_path / "lab" / "spec.toml"
    spec_path.write_text(SPEC.replace("data/cal.csv", "../shared/cal.csv"), encoding="utf-8")
    spec = load_spec(spec_path)
    budget = evaluate(spec)
    ar.archive(spec, budget, tmp_path / "arch")
    m = json.loads((tmp_path / "arch" / "manifest.json").read_text("utf-8"))
    assert [f["path"] for f in m["files"]] == ["../shared/cal.csv"]
    restored = ar.restore(tmp_path / "arch", tmp_path / "out")
    assert (restored.parent / "../shared/cal.csv").resolve().read_text("utf-8") == CAL_CSV
    assert (tmp_path / "out") in (restored.parent / "../shared/cal.csv").resolve().parents
    again = evaluate(load_spec(restored))
    assert again.measurands[0].value == budget.measurands[0].value
    assert again.measurands[0].standard_uncertainty == budget.measurands[0].standard_uncertainty


def test_cli_run_archive(lab, tmp_path, capsys):
    spec_path, spec, budget = lab
    out = tmp_path / "arch"
    assert cli.main(["run", str(spec_path), "--archive", str(out)]) == 0
    assert "archive written" in capsys.readouterr().out
    assert (out / "record.json").read_text("utf-8") == budget.to_json()
    assert cli.main(["run", str(spec_path), "--archive", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--force-archive" in err
    assert cli.main(["run", str(spec_path), "--archive", str(out), "--force-archive"]) == 0
    capsys.readouterr()
    # the folder is checked before any computation: a missing parent is refused at once
    assert cli.main(["run", str(spec_path), "--archive", str(tmp_path / "no" / "arch")]) == 2
