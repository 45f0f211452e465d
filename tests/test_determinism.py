"""Determinism (issue 6, item 7): the same spec, inputs and seed give a byte-identical JSON
record, across separate processes. The record holds no wall-clock time by design.

The reference is the first run itself: two independent ``python -m budget run`` processes
(separate interpreters, separate hash seeds — PYTHONHASHSEED differs per process unless set,
Python documentation) must agree byte for byte, and with an in-process evaluation. A different
seed must change the record, so the comparison is sensitive to the Monte Carlo draws.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys

from evidence_helpers import write_spec_folder

from budget.engine import evaluate
from budget.spec import load_spec


def test_same_seed_gives_byte_identical_record(tmp_path):
    spec = write_spec_folder(tmp_path)
    outs = [tmp_path / f"run{i}.json" for i in (1, 2)]
    env = {**os.environ, "PYTHONHASHSEED": "random"}
    procs = [subprocess.Popen([sys.executable, "-m", "budget", "run", str(spec), "--json",
                               str(o), "--seed", "12345"], stdout=subprocess.DEVNULL,
                              stderr=subprocess.PIPE, env=env, cwd=tmp_path) for o in outs]
    for p in procs:
        _, err = p.communicate(timeout=300)
        assert p.returncode == 0, err.decode()
    a, b = (o.read_bytes() for o in outs)
    assert a == b
    rec = json.loads(a)
    # the --seed given above and the trials = 2000 of evidence_helpers.SPEC
    assert rec["run"]["seed"] == 12345 and rec["monte_carlo"][0]["trials"] == 2000
    assert rec["run"]["files"][0]["path"] == "data/cal.csv"  # a data-file input is included
    # the same in this process (another interpreter state altogether)
    here = evaluate(load_spec(spec), seed=12345).to_json().encode("utf-8")
    assert here == a
    # and the comparison can fail: another seed gives other Monte Carlo numbers
    other = evaluate(load_spec(spec), seed=12346).to_json().encode("utf-8")
    assert other != a
    o = json.loads(other)
    assert o["monte_carlo"][0]["value"] != rec["monte_carlo"][0]["value"]
    assert o["measurands"] == rec["measurands"]  # the linear result does not depend on it
