# Two commands: `make run` (dashboard with the demo corpora) and `make test` (the whole test suite).
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: run test lint bench

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

run: $(STAMP)
	$(BIN)/lexigrowth serve

lint: $(STAMP)
	$(BIN)/ruff check app tests benchmarks demo_corpora
	$(BIN)/ruff format --check app tests benchmarks demo_corpora

test: lint
	$(BIN)/python -m pytest -q
