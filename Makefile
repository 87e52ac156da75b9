# Two commands matter: `make run` and `make test`. Everything else supports them.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
export CALIBRANT_DATABASE_URL ?= sqlite:///./var/calibrant.db

.PHONY: run test lint bench venv migrate clean demo

$(STAMP): pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[dev]'
	touch $(STAMP)

venv: $(STAMP)

migrate: $(STAMP)
	mkdir -p var
	$(BIN)/calibrant migrate

run: migrate
	$(BIN)/calibrant serve --host 127.0.0.1 --port 8000

test: $(STAMP)
	$(BIN)/ruff check service tests migrations demo
	$(BIN)/lint-imports
	$(BIN)/mypy
	$(BIN)/python -m pytest

lint: $(STAMP)
	$(BIN)/ruff check service tests migrations demo
	$(BIN)/lint-imports
	$(BIN)/mypy

# The whole loop in under a minute: an invented courier's six months through a fresh var/demo/.
demo: $(STAMP)
	$(BIN)/python -m demo --workdir var/demo

bench: $(STAMP)
	$(BIN)/python tests/bench/ingest.py
	$(BIN)/python tests/bench/stats.py
	$(BIN)/python tests/bench/cusum.py
	$(BIN)/python tests/bench/query.py
	$(BIN)/python -m tests.bench.alarms
	$(BIN)/python tests/bench/charts_history.py
	$(BIN)/python -m tests.bench.window_null
	$(BIN)/python -m tests.bench.null_year
	$(BIN)/python -m tests.bench.null_year_service
	$(BIN)/python -m tests.bench.hosmer_lemeshow_null
	$(BIN)/python -m tests.bench.delay

clean:
	rm -rf $(VENV) var .pytest_cache
