# Two commands do all the set-up on a fresh machine: `make demo` and `make test`.
# Each first checks the system packages in system/packages.tsv (installing them with apt-get
# where that is allowed, else stopping with the install command), then creates .venv.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
HASH := $(shell cat pyproject.toml | cksum | cut -d' ' -f1)
RUNTIME_STAMP := $(VENV)/.runtime-$(HASH)
TEST_STAMP := $(VENV)/.test-$(HASH)

.PHONY: demo test test-fast lint fix bench clean system-runtime system-test

system-runtime:
	@$(PYTHON) system/ensure.py runtime

system-test:
	@$(PYTHON) system/ensure.py test

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(RUNTIME_STAMP): $(BIN)/python pyproject.toml
	$(BIN)/python -m pip install --quiet -e .
	rm -f $(VENV)/.runtime-*
	touch $(RUNTIME_STAMP)

$(TEST_STAMP): $(BIN)/python pyproject.toml
	$(BIN)/python -m pip install --quiet -e '.[test]'
	rm -f $(VENV)/.test-* $(VENV)/.runtime-*
	touch $(TEST_STAMP) $(RUNTIME_STAMP)

demo: system-runtime
	@$(MAKE) --no-print-directory $(RUNTIME_STAMP)
	$(BIN)/python -m reportgen demo --output output

test: system-test
	@$(MAKE) --no-print-directory $(TEST_STAMP)
	$(BIN)/python -m pytest

test-fast: system-test
	@$(MAKE) --no-print-directory $(TEST_STAMP)
	$(BIN)/python -m pytest -m "not slow and not render"

lint: $(TEST_STAMP)
	$(BIN)/ruff check reportgen tests benchmarks studies system
	$(BIN)/ruff format --check reportgen tests benchmarks studies system

fix: $(TEST_STAMP)
	$(BIN)/ruff check --fix reportgen tests benchmarks studies system
	$(BIN)/ruff format reportgen tests benchmarks studies system

bench: $(TEST_STAMP)
	$(BIN)/python benchmarks/run.py

clean:
	rm -rf build *.egg-info .pytest_cache
