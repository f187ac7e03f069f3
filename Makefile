# Two commands set everything up on a fresh machine: `make demo` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
HOST ?= 127.0.0.1
PORT ?= 8000
DATA_DIR ?= var

.PHONY: install demo run lint test browser postgres bench clean

# Quiet: -qq shows pip's errors only, and PYTHONWARNINGS=ignore silences the build backend's warnings
# (which pip shows even with -q); a failed install still prints why.
PIP := PYTHONWARNINGS=ignore PIP_DISABLE_PIP_VERSION_CHECK=1 $(BIN)/pip
$(STAMP): pyproject.toml
	@echo "installing into $(VENV) (a few minutes the first time)"
	@$(PYTHON) -m venv $(VENV)
	@$(PIP) install -qq --upgrade pip
	@$(PIP) install -qq -e '.[dev]'
	@touch $(STAMP)

install: $(STAMP)

# SERVER_LOG=console shows the server's log lines here instead of in $(DATA_DIR)/demo-server.log.
SERVER_LOG ?= file
demo: $(STAMP)
	@$(BIN)/epoch-assay demo --host $(HOST) --port $(PORT) --data-dir $(DATA_DIR) --server-log $(SERVER_LOG)

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
