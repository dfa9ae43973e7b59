# Two commands on a fresh machine: `make demo` and `make test`.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP_RUN  := $(VENV)/.stamp-run
STAMP_TEST := $(VENV)/.stamp-test
PYTEST_ARGS ?=

.PHONY: demo test test-fast bench soak fuzz clean venv

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(STAMP_RUN): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e .
	touch $@

$(STAMP_TEST): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP_RUN) $@

venv: $(STAMP_RUN)

demo: $(STAMP_RUN)
	$(BIN)/livecoach demo

test: $(STAMP_TEST)
	$(BIN)/python -m pytest -q $(PYTEST_ARGS)

test-fast: $(STAMP_TEST)
	$(BIN)/python -m pytest -q -m "not slow" $(PYTEST_ARGS)

bench: $(STAMP_TEST)
	$(BIN)/python benchmarks/run_all.py

soak: $(STAMP_TEST)
	$(BIN)/python benchmarks/soak.py --hours 12

fuzz: $(STAMP_TEST)
	LIVECOACH_FUZZ=long $(BIN)/python -m pytest -q tests/test_fuzz_inputs.py

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache .hypothesis
