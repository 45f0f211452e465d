"""Every bad-input rule of issue 2 (items 2, 3 and 7) at the library level.

Each case edits a valid spec, loads and evaluates it, and asserts the project's own error class
(budget.errors.SpecError or ModelError) with the file, the line and the field set. The expected
line is the one marked ``# HERE`` in the edited text (counted by the test, not typed in); the
rules themselves come from the issue ("unknown keys are errors with a did-you-mean", "a failure
names the offending inputs", "errors name the construct and the position").
"""

from __future__ import annotations

import math
import textwrap
from pathlib import Path

import pytest
from numeric import near

from budget import evaluate, load_spec
from budget.errors import BudgetError, ModelError, SpecError
from budget.spec import parse_spec

BASE = textwrap.dedent("""\
    [budget]
    title = "Bad-input test"
    coverage_probability = 0.95
    propagation_order = 1

    [model]
    Y = "a * b + c"

    [constants]
    c = 1.0

    [monte_carlo]
    trials = 10000
    seed = 1

    [inputs.a]
    value = 1.0
    standard_uncertainty = 0.1

    [inputs.b]
    distribution = "rectangular"
    value = 2.0
    half_width = 0.5
""")


def edit(*pairs: tuple[str, str]) -> str:
    """Replace whole lines of BASE (each old line must occur exactly once)."""
    lines = BASE.splitlines()
    for old, new in pairs:
        hits = [i for i, ln in enumerate(lines) if ln == old]
        assert len(hits) == 1, old
        lines[hits[0]] = new
    return "\n".join(lines) + "\n"


def add_after(anchor: str, *new: str) -> tuple[str, str]:
    return anchor, "\n".join((anchor,) + new)


def marked_line(text: str) -> int | None:
    for i, ln in enumerate(text.splitlines(), start=1):
        if "# HERE" in ln:
            return i
    return None


def load_and_evaluate(tmp_path: Path, text: str):
    p = tmp_path / "spec.toml"
    p.write_text(text, encoding="utf-8")
    return p, evaluate(load_spec(p), monte_carlo_enabled=False)


def test_base_spec_is_valid(tmp_path):
    # the unedited spec evaluates: Y = a·b + c = 1·2 + 1 = 3 (by hand)
    _, b = load_and_evaluate(tmp_path, BASE)
    assert b.measurand("Y").value == near(3.0)


# (id, spec text, error class, field, words the message must contain)
CASES = [
    # ---- unknown sections and keys, with did-you-mean (issue 2 item 2)
    ("unknown section", edit(add_after('seed = 1', "", "[budgt]  # HERE", 'x = 1')),
     SpecError, "budgt", ["unknown section", "did you mean 'budget'"]),
    ("unknown budget key", edit(add_after('title = "Bad-input test"',
                                          "coverage_probabilty = 0.9  # HERE")),
     SpecError, "budget.coverage_probabilty", ["unknown key", "did you mean 'coverage_probability'"]),
    ("unknown monte_carlo key", edit(("trials = 10000", "trails = 10000  # HERE")),
     SpecError, "monte_carlo.trails", ["did you mean 'trials'"]),
    ("unknown input key", edit(("standard_uncertainty = 0.1",
                                "standard_uncertainity = 0.1  # HERE")),
     SpecError, "inputs.a.standard_uncertainity", ["did you mean 'standard_uncertainty'"]),
    ("unknown correlations key", edit(add_after("half_width = 0.5", "", "[correlations]",
                                                'pair = [["a", "b", 0.1]]  # HERE')),
     SpecError, "correlations.pair", ["did you mean 'pairs'"]),
    ("unknown distribution", edit(('distribution = "rectangular"',
                                   'distribution = "rectangle"  # HERE')),
     SpecError, "inputs.b.distribution", ["did you mean 'rectangular'"]),
    # ---- wrong types
    ("title not a string", edit(('title = "Bad-input test"', "title = 3  # HERE")),
     SpecError, "budget.title", ["must be a string"]),
    ("p as a string", edit(("coverage_probability = 0.95", 'coverage_probability = "0.95"  # HERE')),
     SpecError, "budget.coverage_probability", ["must be a finite number"]),
    ("section not a table", edit(("[budget]", "budget = 3  # HERE"),
                                 ('title = "Bad-input test"', ""), ("coverage_probability = 0.95", ""),
                                 ("propagation_order = 1", "")),
     SpecError, "budget", ["must be a table"]),
    ("model entry not a string", edit(('Y = "a * b + c"', "Y = 3  # HERE")),
     SpecError, "model.Y", ["expression in quotes"]),
    ("constant not a number", edit(("c = 1.0", 'c = "1"  # HERE')),
     SpecError, "constants.c", ["finite number"]),
    ("value as a string", edit(("value = 1.0", 'value = "1.0"  # HERE')),
     SpecError, "inputs.a.value", ["must be a number"]),
    ("u as a boolean", edit(("standard_uncertainty = 0.1", "standard_uncertainty = true  # HERE")),
     SpecError, "inputs.a.standard_uncertainty", ["must be a number"]),
    ("dof as a string", edit(add_after("standard_uncertainty = 0.1", 'dof = "many"  # HERE')),
     SpecError, "inputs.a.dof", ["must be a number"]),
    ("unit not a string", edit(add_after("standard_uncertainty = 0.1", "unit = 1  # HERE")),
     SpecError, "inputs.a.unit", ["must be a string"]),
    ("seed as a string", edit(("seed = 1", 'seed = "x"  # HERE')),
     SpecError, "monte_carlo.seed", ["non-negative integer"]),
    ("observations as text", edit(("value = 1.0", 'observations = "1, 2"  # HERE'),
                                  ("standard_uncertainty = 0.1", "")),
     SpecError, "inputs.a.observations", ["list of numbers"]),
    ("value not finite", edit(("value = 1.0", "value = nan  # HERE")),
     SpecError, "inputs.a.value", ["finite"]),
    # ---- ranges and choices
    ("p = 1", edit(("coverage_probability = 0.95", "coverage_probability = 1.0  # HERE")),
     SpecError, "budget.coverage_probability", ["must lie in"]),
    ("p = 0.3", edit(("coverage_probability = 0.95", "coverage_probability = 0.3  # HERE")),
     SpecError, "budget.coverage_probability", ["must lie in"]),
    ("p = 1.5", edit(("coverage_probability = 0.95", "coverage_probability = 1.5  # HERE")),
     SpecError, "budget.coverage_probability", ["must lie in"]),
    ("order 3", edit(("propagation_order = 1", "propagation_order = 3  # HERE")),
     SpecError, "budget.propagation_order", ["must be 1 or 2"]),
    ("order 0", edit(("propagation_order = 1", "propagation_order = 0  # HERE")),
     SpecError, "budget.propagation_order", ["must be 1 or 2"]),
    ("order true", edit(("propagation_order = 1", "propagation_order = true  # HERE")),
     SpecError, "budget.propagation_order", ["must be 1 or 2"]),
    ("order 1.5", edit(("propagation_order = 1", "propagation_order = 1.5  # HERE")),
     SpecError, "budget.propagation_order", ["must be 1 or 2"]),
    ("trials float", edit(("trials = 10000", "trials = 1.5e4  # HERE")),
     SpecError, "monte_carlo.trials", ['integer or "adaptive"']),
    ("trials word", edit(("trials = 10000", 'trials = "lots"  # HERE')),
     SpecError, "monte_carlo.trials", ['integer or "adaptive"']),
    ("trials boolean", edit(("trials = 10000", "trials = true  # HERE")),
     SpecError, "monte_carlo.trials", ['integer or "adaptive"']),
    ("trials too few", edit(("trials = 10000", "trials = 10  # HERE")),
     SpecError, "monte_carlo.trials", ["must lie between"]),
    ("trials absurd", edit(("trials = 10000", "trials = 1_000_000_000_000  # HERE")),
     SpecError, "monte_carlo.trials", ["must lie between"]),
    ("trials negative", edit(("trials = 10000", "trials = -5  # HERE")),
     SpecError, "monte_carlo.trials", ["must lie between"]),
    ("max_trials absurd", edit(add_after("seed = 1", "max_trials = 10_000_000_000  # HERE")),
     SpecError, "monte_carlo.max_trials", ["must lie between"]),
    ("interval kind", edit(add_after("seed = 1", 'interval = "widest"  # HERE')),
     SpecError, "monte_carlo.interval", ["symmetric", "shortest"]),
    ("significant digits", edit(add_after("seed = 1", "significant_digits = 7  # HERE")),
     SpecError, "monte_carlo.significant_digits", ["must be 1, 2, 3 or 4"]),
    ("evaluation C", edit(add_after("standard_uncertainty = 0.1", 'evaluation = "C"  # HERE')),
     SpecError, "inputs.a.evaluation", ['"A" or "B"']),
    # ---- uncertainties and distribution parameters
    ("negative u", edit(("standard_uncertainty = 0.1", "standard_uncertainty = -0.1  # HERE")),
     SpecError, "inputs.a.standard_uncertainty", [">= 0"]),
    ("negative half-width", edit(("half_width = 0.5", "half_width = -0.5  # HERE")),
     SpecError, "inputs.b.half_width", [">= 0"]),
    ("negative U", edit(("standard_uncertainty = 0.1", "expanded_uncertainty = -0.2  # HERE"),
                        add_after("value = 1.0", "coverage_factor = 2")),
     SpecError, "inputs.a.expanded_uncertainty", [">= 0"]),
    ("U without k", edit(("standard_uncertainty = 0.1", "expanded_uncertainty = 0.2"),
                         ("[inputs.a]", "[inputs.a]  # HERE")),
     SpecError, "inputs.a.coverage_factor", ["required"]),
    ("k = 0", edit(("standard_uncertainty = 0.1", "expanded_uncertainty = 0.2"),
                   add_after("value = 1.0", "coverage_factor = 0  # HERE")),
     SpecError, "inputs.a.coverage_factor", ["> 0"]),
    ("dof zero", edit(add_after("standard_uncertainty = 0.1", "dof = 0  # HERE")),
     SpecError, "inputs.a.dof", ["> 0"]),
    ("low > high", edit(("value = 2.0", "low = 2.0  # HERE"), ("half_width = 0.5", "high = 1.0")),
     SpecError, "inputs.b.low", ["smaller than high"]),
    ("low = high", edit(("value = 2.0", "low = 1.0  # HERE"), ("half_width = 0.5", "high = 1.0")),
     SpecError, "inputs.b.low", ["smaller than high"]),
    ("half-width with bounds", edit(add_after("half_width = 0.5", "low = 1.0")).replace(
        "half_width = 0.5", "half_width = 0.5  # HERE"),
     SpecError, "inputs.b.half_width", ["not both"]),
    ("value not the midpoint", edit(("value = 2.0", "value = 2.5  # HERE"),
                                    ("half_width = 0.5", "low = 1.0\nhigh = 3.0")),
     SpecError, "inputs.b.value", ["midpoint"]),
    ("beta above 1", edit(('distribution = "rectangular"', 'distribution = "trapezoidal"'),
                          add_after("half_width = 0.5", "beta = 1.5  # HERE")),
     SpecError, "inputs.b.beta", ["[0, 1]"]),
    ("beta below 0", edit(('distribution = "rectangular"', 'distribution = "trapezoidal"'),
                          add_after("half_width = 0.5", "beta = -0.2  # HERE")),
     SpecError, "inputs.b.beta", ["[0, 1]"]),
    ("trapezoid without beta", edit(('distribution = "rectangular"',
                                     'distribution = "trapezoidal"'),
                                    ("[inputs.b]", "[inputs.b]  # HERE")),
     SpecError, "inputs.b.beta", ["required"]),
    ("student-t without dof", edit(("[inputs.a]", "[inputs.a]  # HERE"),
                                   add_after("value = 1.0", 'distribution = "student-t"')),
     SpecError, "inputs.a.dof", ["finite dof"]),
    ("bounds on a normal", edit(add_after("standard_uncertainty = 0.1", "low = 0.0  # HERE")),
     SpecError, "inputs.a.low", ["does not apply"]),
    # ---- observations
    ("one observation", edit(("value = 1.0", "observations = [1.0]  # HERE"),
                             ("standard_uncertainty = 0.1", "")),
     SpecError, "inputs.a.observations", ["at least 2"]),
    ("no observations", edit(("value = 1.0", "observations = []  # HERE"),
                             ("standard_uncertainty = 0.1", "")),
     SpecError, "inputs.a.observations", ["at least 2"]),
    ("equal observations", edit(("value = 1.0", "observations = [1.0, 1.0, 1.0]  # HERE"),
                                ("standard_uncertainty = 0.1", "")),
     SpecError, "inputs.a.observations", ["all readings are equal", "F.2.2.1"]),
    ("observation not a number", edit(("value = 1.0", 'observations = [1.0, "x"]  # HERE'),
                                      ("standard_uncertainty = 0.1", "")),
     SpecError, "inputs.a.observations", ["entry 2"]),
    ("observations and value", edit(("standard_uncertainty = 0.1",
                                     "observations = [1.0, 1.1]"),
                                    ("value = 1.0", "value = 1.0  # HERE")),
     SpecError, "inputs.a.value", ["not both"]),
    ("dof with observations", edit(("value = 1.0", "observations = [1.0, 1.1]"),
                                   ("standard_uncertainty = 0.1", "dof = 3  # HERE")),
     SpecError, "inputs.a.dof", ["n − 1"]),
    # ---- names defined twice
    ("input is a constant", edit(add_after("half_width = 0.5", "", "[inputs.c]  # HERE",
                                           "value = 1.0", "standard_uncertainty = 0.1")),
     SpecError, "inputs.c", ["both an input and a constant"]),
    ("input is an output", edit(add_after("half_width = 0.5", "", "[inputs.Y]  # HERE",
                                          "value = 1.0", "standard_uncertainty = 0.1")),
     SpecError, "inputs.Y", ["both an input and a model output"]),
    ("output is a constant", edit(add_after('Y = "a * b + c"', 'c = "2 * a"  # HERE')),
     SpecError, "model.c", ["both an output and a constant"]),
    ("key twice in a table", edit(add_after('Y = "a * b + c"', 'Y = "a"  # HERE')),
     SpecError, None, ["not valid TOML"]),
    # ---- the model
    ("cyclic outputs", edit(('Y = "a * b + c"', 'Y = "A + a"'),
                            add_after('Y = "A + a"', 'A = "B * 2"  # HERE', 'B = "A + b"')),
     ModelError, "model.A", ["cycle", "A -> B -> A"]),
    ("output refers to itself", edit(('Y = "a * b + c"', 'Y = "Y + a"  # HERE')),
     ModelError, "model.Y", ["cycle", "Y -> Y"]),
    ("unknown name", edit(('Y = "a * b + c"', 'Y = "a * bb + c"  # HERE')),
     ModelError, "model.Y", ["unknown name 'bb'", "did you mean 'b'"]),
    ("unknown function", edit(('Y = "a * b + c"', 'Y = "sqr(a) * b"  # HERE')),
     ModelError, "model.Y", ["'sqr'"]),
    ("attribute in the model", edit(('Y = "a * b + c"', 'Y = "a.real * b"  # HERE')),
     ModelError, "model.Y", ["Attribute", "column 1"]),
    ("bad output name", edit(('Y = "a * b + c"', '"2Y" = "a * b"  # HERE')),
     SpecError, "model.2Y", ["must start with an ASCII letter"]),
    ("model not a table", edit(("[budget]", "model = 1  # HERE\n[budget]"), ("[model]", ""),
                               ('Y = "a * b + c"', "")),
     SpecError, "model", ["must be a table"]),
    # ---- correlations
    ("correlation with unknown input", edit(add_after(
        "half_width = 0.5", "", "[correlations]", 'pairs = [["a", "bb", 0.5]]  # HERE')),
     SpecError, "correlations.pairs", ["'bb'", "did you mean 'b'"]),
    ("from_observations without observations", edit(add_after(
        "half_width = 0.5", "", "[correlations]", 'from_observations = [["a", "b"]]  # HERE')),
     SpecError, "correlations.from_observations", ["no observations"]),
]


@pytest.mark.parametrize("text, cls, field, needles", [c[1:] for c in CASES],
                         ids=[c[0] for c in CASES])
def test_bad_spec(tmp_path, text, cls, field, needles):
    p = tmp_path / "spec.toml"
    with pytest.raises(cls) as info:
        load_and_evaluate(tmp_path, text)
    err = info.value
    assert type(err) is cls
    assert err.file == str(p)
    assert err.line == marked_line(text), (err.line, err.one_line())
    if field is not None:
        assert err.field == field
    for needle in needles:
        assert needle in err.message, err.message
    assert "\n" not in err.one_line()


def test_unknown_module_is_located_at_its_key(tmp_path):
    text = edit(add_after("half_width = 0.5", "", "[inputs.d]", 'module = "resistr"  # HERE',
                          'file = "x.csv"'))
    with pytest.raises(SpecError) as info:
        load_and_evaluate(tmp_path, text)
    err = info.value
    assert err.field == "inputs.d.module" and "did you mean 'resistor'" in err.message
    assert err.line == marked_line(text)


def test_bad_input_name_is_located(tmp_path):
    text = edit(add_after("half_width = 0.5", "", '[inputs."a-b"]  # HERE', "value = 1.0",
                          "standard_uncertainty = 0.1"))
    with pytest.raises(SpecError) as info:
        load_and_evaluate(tmp_path, text)
    assert info.value.field == "inputs.a-b" and "must start with an ASCII letter" in info.value.message
    assert info.value.line == marked_line(text)


def test_cycle_message_names_every_member(tmp_path):
    # a three-output cycle: every member and the closing name appear in order
    text = edit(('Y = "a * b + c"', 'P = "Q + a"\nQ = "R * 2"\nR = "P - b"'))
    with pytest.raises(ModelError) as info:
        load_and_evaluate(tmp_path, text)
    assert "P -> Q -> R -> P" in info.value.message


@pytest.mark.parametrize("text, needle", [
    ("", "no [model]"),
    ('[model]\nY = "a"\n', "no inputs"),
])
def test_missing_sections(tmp_path, text, needle):
    # nothing to point at: file and field are set, the line is unknown (None)
    p = tmp_path / "spec.toml"
    with pytest.raises(SpecError) as info:
        load_and_evaluate(tmp_path, text)
    err = info.value
    assert needle in err.message and err.file == str(p) and err.field in ("model", "inputs")


def test_invalid_toml_names_its_line(tmp_path):
    text = BASE.replace("seed = 1", "seed = = 1")
    p = tmp_path / "spec.toml"
    with pytest.raises(SpecError) as info:
        load_and_evaluate(tmp_path, text)
    assert info.value.file == str(p)
    assert info.value.line == text.splitlines().index("seed = = 1") + 1


def test_not_utf8_names_its_line(tmp_path):
    p = tmp_path / "spec.toml"
    raw = BASE.replace('title = "Bad-input test"', 'title = "Caf\xe9"').encode("latin-1")
    p.write_bytes(raw)
    with pytest.raises(SpecError) as info:
        load_spec(p)
    assert info.value.file == str(p) and info.value.line == 2 and "UTF-8" in info.value.message


def test_missing_file(tmp_path):
    with pytest.raises(SpecError) as info:
        load_spec(tmp_path / "nope.toml")
    assert info.value.file == str(tmp_path / "nope.toml")


def test_trials_override_checked(tmp_path):
    # the --trials override is checked like the spec key (MIN_TRIALS … MAX_TRIALS)
    p = tmp_path / "spec.toml"
    p.write_text(BASE, encoding="utf-8")
    with pytest.raises(SpecError) as info:
        evaluate(load_spec(p), trials=10)
    assert info.value.field == "--trials"


def test_zero_uncertainty_is_a_constant(tmp_path):
    # issue 2 item 2: "a zero standard uncertainty is a constant" — it takes part in the model
    # but gets no budget row
    text = edit(("standard_uncertainty = 0.1", "standard_uncertainty = 0.0"))
    _, b = load_and_evaluate(tmp_path, text)
    m = b.measurand("Y")
    assert [t.name for t in m.terms] == ["b"]
    # u(Y) = |∂Y/∂b| u(b) = a · 0.5/√3 = 0.5/√3 (JCGM 100 §4.3.7)
    assert m.standard_uncertainty == near(0.5 / math.sqrt(3), rel=1e-12)


def test_observations_type_a(tmp_path):
    # JCGM 100 §4.2: mean, s/√n, ν = n − 1; by hand for 1.0, 1.2, 1.4: mean 1.2, s = 0.2,
    # u = 0.2/√3
    text = edit(("value = 1.0", "observations = [1.0, 1.2, 1.4]"),
                ("standard_uncertainty = 0.1", ""))
    _, b = load_and_evaluate(tmp_path, text)
    a = b.input("a")
    assert a.value == near(1.2) and a.dof == 2 and a.evaluation == "A"
    assert a.standard_uncertainty == near(0.2 / math.sqrt(3), rel=1e-12)


def test_expanded_uncertainty_over_k(tmp_path):
    # a certificate's U with k: u = U/k (JCGM 100 §4.3.3)
    text = edit(("standard_uncertainty = 0.1", "expanded_uncertainty = 0.3"),
                add_after("value = 1.0", "coverage_factor = 3"))
    _, b = load_and_evaluate(tmp_path, text)
    assert b.input("a").standard_uncertainty == near(0.1)


def test_every_error_is_a_budget_error():
    # the CLI maps BudgetError to exit 2; each class used above must derive from it
    assert issubclass(SpecError, BudgetError) and issubclass(ModelError, BudgetError)


def test_parse_spec_without_file_names_string():
    with pytest.raises(SpecError) as info:
        parse_spec("[budgt]\n")
    assert info.value.file == "<string>" and info.value.line == 1
