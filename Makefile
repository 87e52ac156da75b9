# Two commands matter: `make run` and `make test`. Everything else supports them.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
export CALIBRANT_DATABASE_URL ?= sqlite:///./var/calibrant.db

.PHONY: run test lint bench venv browser migrate clean demo

$(STAMP): pyproject.toml clients/python/pyproject.toml
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	# One command, so pip takes the server's calibrant-client requirement from clients/python.
	$(BIN)/python -m pip install --quiet -e ./clients/python -e '.[dev]'
	touch $(STAMP)

# The page tests drive Debian's Chromium (never a browser Playwright downloads). Installed once,
# quietly, when it is not on PATH; CI runs as root on a fresh machine, where apt-get works as is.
browser:
	@command -v chromium >/dev/null 2>&1 || { \
	  if [ "$$(id -u)" = 0 ]; then \
	    echo "installing chromium (apt-get) for the page tests"; \
	    apt-get update -qq >/dev/null && \
	    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium >/dev/null; \
	  else \
	    echo "chromium is not installed: run 'sudo apt-get install -y chromium' for the page tests"; \
	  fi; }

venv: $(STAMP) browser

migrate: $(STAMP)
	mkdir -p var
	$(BIN)/calibrant migrate

# Host and port come from CALIBRANT_HOST and CALIBRANT_PORT (default 127.0.0.1:8000).
run: migrate
	$(BIN)/calibrant serve

test: $(STAMP) browser
	$(BIN)/ruff check service tests migrations demo clients deploy
	$(BIN)/lint-imports
	$(BIN)/mypy
	$(BIN)/python -m pytest

lint: $(STAMP)
	$(BIN)/ruff check service tests migrations demo clients deploy
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
	$(BIN)/python -m tests.bench.fuzz
	$(BIN)/python -m tests.bench.pages
	$(BIN)/python -m tests.bench.report
	$(BIN)/python -m tests.bench.coverage
	$(BIN)/python -m tests.bench.delay
	$(BIN)/python -m tests.bench.import
	$(BIN)/python -m tests.bench.refresh

clean:
	rm -rf $(VENV) var .pytest_cache
