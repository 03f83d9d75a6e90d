# Beamledger — the two commands a new user needs are `make demo` and `make test`.
PYTHON ?= $(shell command -v python3.11 || command -v python3)
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed-stamp
HOST ?= 127.0.0.1
PORT ?= 8000

.PHONY: install demo test lint format migrations-check bench clean-demo help

help:
	@echo "make demo    - install, load the invented demo facility and serve it on http://$(HOST):$(PORT)"
	@echo "make test    - install and run the whole test suite"
	@echo "make lint    - ruff check and format check"
	@echo "make bench   - run the benchmarks (they print figures)"

$(STAMP): pyproject.toml
	@test -n "$(PYTHON)" || { echo "Python 3.11 or newer is needed (python3.11 or python3 on PATH)" >&2; exit 1; }
	@test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[dev]'
	@touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	$(PY) manage.py migrate --noinput
	$(PY) manage.py load_demo
	@echo ""
	@echo "Beamledger demo: http://$(HOST):$(PORT)/   (stop with Ctrl-C)"
	@echo "Demo logins (password for all: $$($(PY) manage.py load_demo --print-password)):"
	@$(PY) manage.py load_demo --list-logins
	$(PY) manage.py runserver $(HOST):$(PORT)

test: $(STAMP)
	$(PY) -m pytest $(PYTEST_ARGS)

lint: $(STAMP)
	$(VENV)/bin/ruff check .
	$(VENV)/bin/ruff format --check .

format: $(STAMP)
	$(VENV)/bin/ruff check --fix .
	$(VENV)/bin/ruff format .

migrations-check: $(STAMP)
	$(PY) manage.py makemigrations --check --dry-run

bench: $(STAMP)
	$(PY) benchmarks/assess_bench.py
	$(PY) benchmarks/pipeline_bench.py
	$(PY) benchmarks/billing_bench.py
	$(PY) benchmarks/pages_bench.py
	@echo "benchmarks/finder_bench.py needs PostgreSQL; run it by hand (see its --help)"
