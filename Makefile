# One entry point for every check and for running the service.
# `make test` runs ruff and the whole suite on SQLite; when SPATLINE_TEST_DATABASE_URL
# names a PostgreSQL database, the database tests run there too.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed-stamp
# Where `make demo` and `make serve` listen: `make demo PORT=8001` when 8000 is taken.
HOST ?= 127.0.0.1
PORT ?= 8000

.PHONY: venv test test-sqlite test-postgres lint demo serve bench clean

# setup.py and the kernel source too: an edited kernel is rebuilt by the next make.
$(STAMP): pyproject.toml setup.py chemistry/_kernel.c
	$(PYTHON) -c 'import sys; sys.exit("Python 3.11 or newer is needed, found " + sys.version.split()[0]) if sys.version_info < (3, 11) else None'
	test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --disable-pip-version-check -e '.[dev]'
	touch $(STAMP)

venv: $(STAMP)

lint: $(STAMP)
	$(BIN)/ruff check .

test-sqlite: $(STAMP)
	env -u SPATLINE_TEST_DATABASE_URL $(BIN)/python -m pytest

test-postgres: $(STAMP)
	@test -n "$$SPATLINE_TEST_DATABASE_URL" || { echo "SPATLINE_TEST_DATABASE_URL is not set"; exit 2; }
	$(BIN)/python -m pytest -m "db or postgres"

test: lint test-sqlite
	@if [ -n "$$SPATLINE_TEST_DATABASE_URL" ]; then $(MAKE) --no-print-directory test-postgres; fi

demo: $(STAMP)
	$(BIN)/spatline demo --port $(PORT)
	$(BIN)/spatline serve --host $(HOST) --port $(PORT)

serve: $(STAMP)
	$(BIN)/spatline migrate
	$(BIN)/spatline serve --host $(HOST) --port $(PORT)

bench: $(STAMP)
	$(BIN)/python -m bench

clean:
	rm -rf $(VENV) var .pytest_cache .ruff_cache .hypothesis
