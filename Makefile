# Two commands matter: `make demo` and `make test`. Both set up .venv on their own.
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: setup demo test lint typecheck bench fuzz clean

$(STAMP): pyproject.toml
	$(PY) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e '.[test,report]'
	touch $(STAMP)

setup: $(STAMP)

demo: $(STAMP)
	$(BIN)/trendledger demo demo/run

lint: $(STAMP)
	$(BIN)/ruff check src tests demo bench

typecheck: $(STAMP)
	$(BIN)/mypy

test: $(STAMP) lint typecheck
	$(BIN)/pytest -q

bench: $(STAMP)
	$(BIN)/python bench/run.py

clean:
	rm -rf $(VENV) demo/run .pytest_cache .mypy_cache .ruff_cache
