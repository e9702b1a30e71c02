# Two commands matter: `make demo` and `make test`. Both set up .venv on their own.
PY ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: setup system demo test lint typecheck bench fuzz clean

$(STAMP): pyproject.toml
	$(PY) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e '.[test,report,engines]'
	touch $(STAMP)

setup: $(STAMP)

# Debian packages the engine and browser tests use (PostgreSQL server, Chromium,
# Java for Spark). Installed only when running as root with apt-get; otherwise
# those tests skip and say why.
system:
	@if [ "$$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then \
	  need=""; \
	  command -v chromium >/dev/null 2>&1 || need="$$need chromium"; \
	  ls /usr/lib/postgresql/*/bin/initdb >/dev/null 2>&1 || need="$$need postgresql"; \
	  command -v java >/dev/null 2>&1 || need="$$need default-jre-headless"; \
	  if [ -n "$$need" ]; then \
	    echo "installing:$$need"; \
	    apt-get update -q >/dev/null && \
	    DEBIAN_FRONTEND=noninteractive apt-get install -y -q --no-install-recommends $$need >/dev/null; \
	  fi; \
	else \
	  echo "not root or no apt-get: PostgreSQL/Chromium tests may skip"; \
	fi

demo: $(STAMP)
	$(BIN)/trendledger demo demo/run

lint: $(STAMP)
	$(BIN)/ruff check src tests demo bench

typecheck: $(STAMP)
	$(BIN)/mypy

# two workers: the machines that run it have two cores
test: $(STAMP) system lint typecheck
	$(BIN)/pytest -q -n 2

bench: $(STAMP)
	$(BIN)/python bench/append_bench.py
	$(BIN)/python bench/fleet_bench.py

fuzz: $(STAMP)
	TRENDLEDGER_FUZZ=long $(BIN)/pytest -q -n 2 tests/test_hostile_input.py tests/test_crash.py tests/test_races.py \
	  tests/test_names.py tests/test_engines.py

clean:
	rm -rf $(VENV) demo/run .pytest_cache .mypy_cache .ruff_cache
