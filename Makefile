# Two commands do all the set-up on a fresh machine: `make demo` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed-$(shell cat pyproject.toml | cksum | cut -d' ' -f1)

.PHONY: demo test lint fix bench clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(STAMP): $(BIN)/python pyproject.toml
	$(BIN)/python -m pip install --quiet -e '.[test]'
	rm -f $(VENV)/.installed-*
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/python -m reportgen demo --output output

test: $(STAMP)
	$(BIN)/python -m pytest

lint: $(STAMP)
	$(BIN)/ruff check reportgen tests benchmarks studies
	$(BIN)/ruff format --check reportgen tests benchmarks studies

fix: $(STAMP)
	$(BIN)/ruff check --fix reportgen tests benchmarks studies
	$(BIN)/ruff format reportgen tests benchmarks studies

bench: $(STAMP)
	$(BIN)/python benchmarks/run.py

clean:
	rm -rf build *.egg-info .pytest_cache
