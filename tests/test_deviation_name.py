"""The chain deviation's unit-free name ``delta_I`` and its former names (``dev_ppm`` …).

The deviation is the pure number q − 1 = I/(n·e·f) − 1 (budget/chains.py), shown in µA/A;
records written before the rename call it ``dev_ppm`` with the same SI number and the display
unit beside it (README "The result record"), so compare and the logbook match them by name.
Derivations beside the checks: the weighted mean of two independent runs with equal values x
and equal u is x with internal uncertainty u/√2 (1/√(1/u² + 1/u²), GUM-free arithmetic of the
inverse-variance mean, common practice). The numbers of the spec are invented.
"""

from __future__ import annotations

import json

import pytest
from numeric import near

from budget.compare import compare_runs
from budget.engine import evaluate
from budget.errors import DataError, SpecError
from budget.logbook import Logbook, add_files
from budget.record import record_from_text
from budget.spec import parse_spec

SPEC = """[budget]
title = "deviation name (invented numbers)"
[model]
chain = "resistor-voltmeter"
n = 1
{extra}
[monte_carlo]
enabled = false
[inputs.dV]
value = 0.0961306
standard_uncertainty = 2e-8
unit = "V"
[inputs.R]
value = 1.0e9
standard_uncertainty = 100
unit = "Ω"
[inputs.g]
value = 1.0000002
standard_uncertainty = 1.5e-8
unit = "1"
[inputs.f]
value = 600e6
standard_uncertainty = 0.0035
unit = "Hz"
"""


def _record(extra: str = "") -> str:
    return evaluate(parse_spec(SPEC.format(extra=extra)), monte_carlo_enabled=False).to_json()


def _record_other_run() -> str:
    """A record of another run of the same chain: the spec with its own dV reading."""
    spec = parse_spec(SPEC.format(extra="").replace("value = 0.0961306", "value = 0.0961307"))
    return evaluate(spec, monte_carlo_enabled=False).to_json()


def _old_name(text: str, *, keep_display_unit: bool = True) -> str:
    """The record as versions before the rename wrote it: the deviation named dev_ppm."""
    d = json.loads(text)
    for m in d["measurands"]:
        if m["name"] == "delta_I":
            m["name"] = "dev_ppm"
            if not keep_display_unit:
                m.pop("display_unit")
    d["correlation"]["measurands"] = ["dev_ppm" if n == "delta_I" else n
                                      for n in d["correlation"]["measurands"]]
    d["run"]["model"] = {("dev_ppm" if k == "delta_I" else k): v
                         for k, v in d["run"]["model"].items()}
    return json.dumps(d, indent=2, ensure_ascii=False) + "\n"


def test_the_chain_names_its_deviation_without_a_unit():
    b = record_from_text(_record())
    assert [m.name for m in b.measurands] == ["I", "delta_I"]
    # the same name at every display scale: the value is the same pure number
    b8 = record_from_text(_record('deviation_unit = "10⁻⁸"'))
    assert [m.name for m in b8.measurands] == ["I", "delta_I"]
    m6, m8 = b.measurand("delta_I"), b8.measurand("delta_I")
    assert (m6.unit, m8.unit) == ("µA/A", "×10⁻⁸")
    assert m8.value == near(m6.value * 100, rel=1e-12)      # 1 µA/A = 100 × 10⁻⁸


def test_compare_matches_a_record_with_the_former_name():
    new = record_from_text(_record())
    old = record_from_text(_old_name(_record()))
    assert [m.name for m in old.measurands] == ["I", "dev_ppm"]
    c = compare_runs([new, old])
    assert c.measurand == "delta_I"
    m = new.measurand("delta_I")
    # equal values and u, independent (typed-in, not shared): mean x, internal u/√2
    assert c.mean.value == near(m.value, rel=1e-12)
    assert c.mean.internal_uncertainty == near(m.standard_uncertainty / 2 ** 0.5, rel=1e-9)
    assert any("dev_ppm matched as delta_I" in n for n in c.notes)
    # the other way round (an old first record): delta_I matched as dev_ppm
    assert compare_runs([old, new]).measurand == "dev_ppm"


def test_a_former_name_in_a_bare_unit_is_not_matched():
    # without a display unit the record might hold (q − 1)·10⁶ in unit 1: never matched
    old = record_from_text(_old_name(_record(), keep_display_unit=False))
    with pytest.raises(DataError, match="has no measurand 'delta_I'"):
        compare_runs([record_from_text(_record()), old])


def test_logbook_trend_series_joins_former_and_new_names(tmp_path):
    new, old = tmp_path / "new.json", tmp_path / "old.json"
    new.write_text(_record(), encoding="utf-8")
    # another run (its own dV): the book keeps a re-run of the same spec and files once
    old.write_text(_old_name(_record_other_run()), encoding="utf-8")
    book = tmp_path / "book.sqlite"
    add_files(book, [new, old])
    with Logbook.open(book) as lb:
        for name in ("delta_I", "dev_ppm"):
            s = lb.series(name)
            assert len(s.rows) + s.undated == 2, name     # both records, either name
        assert len(lb.series("I").rows) + lb.series("I").undated == 2


def test_spec_keys_under_the_former_name():
    # outputs_map accepts the former name as its key
    s = parse_spec(SPEC.format(extra='outputs_map = {dev_ppm = "dev"}'))
    assert list(s.outputs) == ["I", "dev"]
    # [units] under the former name: refused, naming the new one
    with pytest.raises(SpecError, match="is now called delta_I"):
        parse_spec(SPEC.format(extra="") + '[units]\ndev_ppm = "nA/A"\n')
    with pytest.raises(SpecError, match="is now called delta_I"):
        parse_spec(SPEC.format(extra="") + '[outputs.dev_ppm]\nsymbol = "d"\n')
