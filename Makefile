# Two commands on a fresh machine: `make demo` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
TEST_STAMP := $(VENV)/.installed-test
DEMO_OUT ?= demo-output

.PHONY: demo test lint bench clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --upgrade pip >/dev/null

$(STAMP): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install -e . 
	touch $@

$(TEST_STAMP): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install -e '.[test]'
	touch $(STAMP) $@

demo: $(STAMP)
	$(BIN)/transport demo --out $(DEMO_OUT)

test: $(TEST_STAMP)
	$(BIN)/ruff check transport tests benchmarks examples
	$(BIN)/python -m pytest -q

lint: $(TEST_STAMP)
	$(BIN)/ruff check transport tests benchmarks examples

bench: $(TEST_STAMP)
	$(BIN)/python benchmarks/run_all.py

clean:
	rm -rf $(VENV) $(DEMO_OUT) .pytest_cache .ruff_cache
