# Treewright's everyday commands. `make demo` and `make test` are the README's quick start.
# Needs Python 3.11 (python3.11, or python3 when that is 3.11 or newer).

PYTHON ?= $(shell command -v python3.11 || command -v python3)
VENV   := .venv
BIN    := $(VENV)/bin
DATA   ?= data
# Three test workers on two cores, so that tests that wait (browsers, servers, background jobs)
# leave no core idle. Whole suite, load about 2 to 4: three workers 365 s (warm numba cache) and
# 424 s (fresh clone); two workers 434 s (warm) and 388 s (fresh clone). The difference is
# within the noise between runs; three was not slower.
PYTEST_WORKERS ?= 3
# Seconds one test may take before it fails as hung (pytest-timeout); generous on purpose.
PYTEST_TIMEOUT ?= 900

.PHONY: demo test test-app lint format typecheck bench install install-test chromium clean-venv

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

# Stamp files: reinstall only when pyproject.toml changes.
$(VENV)/.installed: $(BIN)/python pyproject.toml
	$(BIN)/python -m pip install --quiet -e .
	touch $@

$(VENV)/.installed-test: $(BIN)/python pyproject.toml
	$(BIN)/python -m pip install --quiet -e ".[test]"
	touch $@ $(VENV)/.installed

install: $(VENV)/.installed

install-test: $(VENV)/.installed-test

## demo: load the demo into ./data and serve it on http://127.0.0.1:8000 (prints the logins)
demo: install
	$(BIN)/treewright demo --data-dir $(DATA)

## chromium: as root, install Debian's Chromium for the browser tests when it is missing
chromium:
	@if [ ! -x /usr/bin/chromium ]; then \
	  if [ "$$(id -u)" = "0" ]; then \
	    echo "make test: installing Debian's chromium package for the browser tests (apt-get)"; \
	    apt-get update && DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends chromium; \
	  else \
	    echo "note: /usr/bin/chromium is missing and this is not root: browser tests will skip"; \
	  fi; \
	fi

## test: the whole suite (parser, app, browser) on three workers (PYTEST_WORKERS)
test: install-test chromium
	$(BIN)/python -m pytest -n $(PYTEST_WORKERS) --timeout=$(PYTEST_TIMEOUT) -q --durations=15

## test-app: only the app tests (the PostgreSQL pass of .ci/run uses this)
test-app: install-test
	$(BIN)/python -m pytest -n $(PYTEST_WORKERS) --timeout=$(PYTEST_TIMEOUT) -q tests/app

lint: install-test
	$(BIN)/ruff check app parser tests bench migrations setup.py
	$(BIN)/ruff format --check app parser tests bench migrations setup.py

## format: rewrite the Python sources in the project's one layout (ruff format; make lint checks it)
format: install-test
	$(BIN)/ruff format app parser tests bench migrations setup.py

typecheck: install-test
	$(BIN)/mypy

## bench: every script in bench/ (each prints its own side-by-side figures)
bench: install
	@set -e; for script in bench/*.py; do \
	  echo "== $$script"; $(BIN)/python $$script; \
	done

clean-venv:
	rm -rf $(VENV)
