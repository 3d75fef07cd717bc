# Two commands set everything up on a fresh machine: `make demo` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP_TEST := $(VENV)/.installed-test
STAMP_DEMO := $(VENV)/.installed-demo

.PHONY: demo test lint bench validate validate-time-dependent clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(STAMP_DEMO): $(BIN)/python setup.cfg pyproject.toml
	$(BIN)/python -m pip install --quiet -e ".[parquet]"
	touch $@

$(STAMP_TEST): $(BIN)/python setup.cfg pyproject.toml
	$(BIN)/python -m pip install --quiet -e ".[test]"
	touch $@ $(STAMP_DEMO)

demo: $(STAMP_DEMO)
	$(BIN)/python -m inhibkin.cli demo

lint: $(STAMP_TEST)
	$(BIN)/ruff check inhibkin tests benchmarks scripts

test: $(STAMP_TEST) lint
	$(BIN)/python -m pytest -n 2 -q

bench: $(STAMP_TEST)
	$(BIN)/python -m benchmarks

validate: $(STAMP_TEST)
	$(BIN)/python -m benchmarks.validation
	$(BIN)/python -m benchmarks.initial_rate_study --out docs/validation.md
	$(BIN)/python -m benchmarks.reads_study --out docs/validation.md
	$(BIN)/python -m benchmarks.edge_power_study --out docs/validation.md
	$(BIN)/python -m benchmarks.lack_of_fit_study 100

validate-time-dependent: $(STAMP_TEST)
	$(BIN)/python -m benchmarks.time_dependent_study --out docs/time_dependent.md

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache .ruff_cache
