# Quick start: `make demo` and `make test` each create .venv when it is missing.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
DEMO_OUT ?= demo_output

.PHONY: demo test lint bench clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(VENV)/.installed: $(BIN)/python pyproject.toml
	$(BIN)/python -m pip install --quiet -e .
	touch $@

$(VENV)/.installed-test: $(VENV)/.installed pyproject.toml
	$(BIN)/python -m pip install --quiet -e ".[test]"
	touch $@

demo: $(VENV)/.installed
	$(BIN)/nutricap demo --out $(DEMO_OUT) --overwrite

test: $(VENV)/.installed-test
	$(BIN)/python -m pytest -q -n 2
	$(BIN)/ruff check nutricap tests benchmarks example_landscape

lint: $(VENV)/.installed-test
	$(BIN)/ruff check nutricap tests benchmarks example_landscape
	$(BIN)/ruff format --check nutricap tests benchmarks example_landscape

bench: $(VENV)/.installed-test
	$(BIN)/python benchmarks/solver.py

clean:
	rm -rf $(VENV) $(DEMO_OUT) .pytest_cache
