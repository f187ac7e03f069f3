# Two commands set everything up on a fresh machine: `make demo` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
HOST ?= 127.0.0.1
PORT ?= 8000
DATA_DIR ?= var

.PHONY: install demo run lint test browser postgres bench clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip
	$(BIN)/pip install --quiet -e '.[dev]'
	touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	$(BIN)/epoch-assay demo --host $(HOST) --port $(PORT) --data-dir $(DATA_DIR)

run: $(STAMP)
	$(BIN)/epoch-assay serve --host $(HOST) --port $(PORT) --data-dir $(DATA_DIR)

# The report test renders pages in Debian's headless Chromium; CI runs as root and installs it here.
browser:
	command -v chromium >/dev/null || (apt-get update && apt-get install -y chromium)

# The API and storage tests also run on a real PostgreSQL server that tests/support/postgres.py starts
# from Debian's programs (/usr/lib/postgresql/*/bin); CI runs as root and installs them here.
postgres:
	ls /usr/lib/postgresql/*/bin/initdb >/dev/null 2>&1 || (apt-get update && DEBIAN_FRONTEND=noninteractive apt-get install -y postgresql)

# Style, formatting, the layering contract (pyproject.toml [tool.importlinter]) and types: zero findings.
lint: $(STAMP)
	$(BIN)/ruff check .
	$(BIN)/ruff format --check .
	$(BIN)/lint-imports
	$(BIN)/mypy

# Lint, then everything on SQLite, then the API and storage tests again on PostgreSQL.
test: $(STAMP) lint browser postgres
	$(BIN)/python -m pytest
	EPOCH_ASSAY_TEST_DATABASE=postgresql $(BIN)/python -m pytest tests/service/api tests/service/storage

bench: $(STAMP)
	for script in tests/benchmarks/bench_*.py; do $(BIN)/python $$script || exit 1; done

clean:
	rm -rf $(VENV) var test-artifacts
