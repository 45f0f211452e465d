"""The shipped JSON Schemas and their validator (issue 17, class 3: edited or foreign records).

Outside references: the ``jsonschema`` package (the reference implementation of JSON Schema in
Python) checks that ``budget/schemas/*.json`` are valid draft 2020-12 schemas and agrees with
:mod:`budget.schema` on which edited records fit — except where :mod:`budget.schema` is stricter
on purpose: numbers must be finite float64 values (RFC 8259 §6 leaves the range of JSON numbers
to implementations; IEEE 754 binary64 is the interoperable one it names).
"""

from __future__ import annotations

import copy
import json
import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from budget.record import record_from_text
from budget.schema import SchemaViolation, load_schema, validate

jsonschema = pytest.importorskip("jsonschema")

RECORD = None


def base_record() -> dict:
    global RECORD
    if RECORD is None:
        from budget.engine import evaluate
        from budget.spec import parse_spec
        spec = parse_spec('[budget]\ntitle = "schema test (invented)"\n[model]\ny = "a * b"\n'
                          "[monte_carlo]\ntrials = 1000\nseed = 3\n[inputs.a]\nvalue = 2.0\n"
                          "standard_uncertainty = 0.1\ndof = 9\n[inputs.b]\nvalue = 3.0\n"
                          'distribution = "triangular"\nhalf_width = 0.2\n')
        RECORD = json.loads(evaluate(spec).to_json())
    return copy.deepcopy(RECORD)


@pytest.mark.parametrize("name", ["record.schema.json", "spec.schema.json"])
def test_shipped_schemas_are_valid_draft_2020_12(name):
    jsonschema.Draft202012Validator.check_schema(load_schema(name))


def test_a_real_record_fits():
    rec = base_record()
    validate(rec, load_schema("record.schema.json"))
    jsonschema.Draft202012Validator(load_schema("record.schema.json")).validate(rec)


@pytest.mark.parametrize("path, value, field", [
    (("run", "model"), [["y", "a * b"]], "run.model"),
    (("measurands", 0, "unit"), -0.0, "measurands[0].unit"),
    (("run", "coverage_probability"), "abc", "run.coverage_probability"),
    (("run", "modules"), "text", "run.modules"),
    (("measurands", 0, "terms", 0, "dof"), 0, "measurands[0].terms[0].dof"),
    (("inputs", 0, "distribution", "kind"), "gauss", "inputs[0].distribution.kind"),
    (("monte_carlo", 0, "trials"), 10 ** 400, "monte_carlo[0].trials"),
    (("correlation", "matrix"), [[1.5]], "correlation.matrix[0][0]"),
])
def test_edited_record_refused_naming_the_field(path, value, field):
    rec = base_record()
    target = rec
    for p in path[:-1]:
        target = target[p]
    target[path[-1]] = value
    from budget.errors import DataError
    with pytest.raises(DataError) as info:
        record_from_text(json.dumps(rec), file="rec.json")
    assert info.value.field == field
    assert not jsonschema.Draft202012Validator(load_schema("record.schema.json")).is_valid(rec) \
        or value == 10 ** 400  # jsonschema accepts any integer; budget.schema wants a float64


def test_added_keys_are_allowed():
    # later versions add keys (a top-level warnings list, display units): still readable
    rec = base_record()
    rec["warnings"] = [{"code": "x", "input": "a", "severity": "note", "message": "invented"}]
    rec["measurands"][0]["display_unit"] = "µA/A"
    rec["run"]["something_new"] = {"any": ["thing"]}
    record_from_text(json.dumps(rec), file="rec.json")


def _finite_everywhere(obj) -> bool:
    if isinstance(obj, float):
        return math.isfinite(obj)
    if isinstance(obj, int) and not isinstance(obj, bool):
        return abs(obj) < 2 ** 1023
    if isinstance(obj, dict):
        return all(_finite_everywhere(v) for v in obj.values())
    if isinstance(obj, list):
        return all(_finite_everywhere(v) for v in obj)
    return True


def _walk(o, pre):
    yield pre
    if isinstance(o, dict):
        for k, v in o.items():
            yield from _walk(v, pre + (k,))
    elif isinstance(o, list):
        for i, v in enumerate(o):
            yield from _walk(v, pre + (i,))


LEAVES = st.one_of(st.none(), st.booleans(), st.integers(-3, 3), st.floats(-2, 2),
                   st.text(max_size=3), st.just([]), st.just({}))


@settings(derandomize=True, max_examples=150, deadline=None, database=None)
@given(data=st.data())
def test_validator_agrees_with_jsonschema(data):
    rec = base_record()
    for _ in range(data.draw(st.integers(1, 2))):
        paths = list(_walk(rec, ()))
        path = data.draw(st.sampled_from(paths[1:]))
        target = rec
        for p in path[:-1]:
            target = target[p]
        target[path[-1]] = data.draw(LEAVES)
    ours = True
    try:
        validate(rec, load_schema("record.schema.json"))
    except SchemaViolation:
        ours = False
    theirs = jsonschema.Draft202012Validator(load_schema("record.schema.json")).is_valid(rec)
    assert ours == (theirs and _finite_everywhere(rec))


def test_record_format_version_and_the_older_one_still_read(tmp_path):
    # The schema file declares exactly the formats the reader accepts (one place for key
    # types, DEVELOPERS.md "schema.py"): the current one and the older ones still read.
    from budget.result import OLDER_SCHEMAS, SCHEMA
    shipped = load_schema("record.schema.json")
    assert shipped["properties"]["schema"]["enum"] == [SCHEMA, *OLDER_SCHEMAS]
    assert shipped["$id"] == SCHEMA
    rec = base_record()
    assert rec["schema"] == SCHEMA == "qcs-budget/record-2"
    # a record-1 record, as older versions wrote it (no Monte Carlo verdict nor numerical
    # accuracy): still read, its numbers as they stand
    old = base_record()
    old["schema"] = "qcs-budget/record-1"
    for mc in old["monte_carlo"]:
        for k in ("verdict", "procedure", "stabilised", "numerical_accuracy", "stop_tolerance"):
            mc.pop(k, None)
    b = record_from_text(json.dumps(old))
    assert b.schema == "qcs-budget/record-1"
    assert b.measurands[0].value == rec["measurands"][0]["value"]
    # a format this version does not know is refused, naming what it reads
    from budget.errors import DataError
    for unknown in ("qcs-budget/record-0", "qcs-budget/record-3"):
        old["schema"] = unknown
        with pytest.raises(DataError, match="this version reads 'qcs-budget/record-2' and "
                                            "the older 'qcs-budget/record-1'") as info:
            record_from_text(json.dumps(old))
        assert info.value.field == "schema"
