# Every target does its own set-up on a fresh machine: it creates .venv and installs the project
# with its test extra before running.
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test bench clean lint wheel-check fuzz mutate

$(STAMP): pyproject.toml
	$(PY) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/python worked_examples/run_demo.py

# two worker processes (pytest-xdist), whole files to one worker each (module fixtures run
# once); `pytest` alone still runs everything in one process
test: $(STAMP)
	$(BIN)/python -m pytest -n 2 --dist loadfile

# the long fuzz profile (by hand): 5 000 cases for each of the four generated properties
fuzz: $(STAMP)
	BUDGET_FUZZ_EXAMPLES=5000 $(BIN)/python -m pytest -p no:cacheprovider tests/test_fuzz.py --hypothesis-show-statistics

# mutation testing of the numerical core (by hand, never in CI: about an hour per full pass):
# the named bugs of issue 18 first, then every mutant of each core module; results in .mutate/,
# the kill rates in tests/README.md. MUTATE_ARGS="budget.compare --sample 40" narrows a run.
mutate: $(STAMP)
	nice -n 15 $(BIN)/python tests/mutate.py --known
	nice -n 15 $(BIN)/python tests/mutate.py $(MUTATE_ARGS)

# a wheel built from this checkout, installed in a fresh venv, renders a report (CI runs it)
wheel-check: $(STAMP)
	PY=$(abspath $(BIN)/python) .ci/wheel_check.sh

lint: $(STAMP)
	$(BIN)/ruff check budget tests benchmarks worked_examples

bench: $(STAMP)
	$(BIN)/python benchmarks/run_all.py

clean:
	rm -rf $(VENV) demo-output .pytest_cache build *.egg-info
