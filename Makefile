# Two entry points, each doing all set-up from a fresh clone: `make demo` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

CHROMIUM := /usr/bin/chromium

.PHONY: demo test lint bench clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/pip install -q --upgrade pip
	$(BIN)/pip install -q -e '.[dev]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/foldwise demo

lint: $(STAMP)
	$(BIN)/ruff check .
	$(BIN)/ruff format --check .
	$(BIN)/mypy

# The report tests drive Debian's chromium package; browsers cannot be downloaded any other way
# here, so Playwright's own browser download is never used.
$(CHROMIUM):
	apt-get update -q
	DEBIAN_FRONTEND=noninteractive apt-get install -y -q chromium

test: lint $(CHROMIUM)
	$(BIN)/pytest

bench: $(STAMP)
	$(BIN)/python tests/benchmarks/bench_select.py
	$(BIN)/python tests/benchmarks/bench_fixed_costs.py
	$(BIN)/python tests/benchmarks/bench_service.py
	$(BIN)/python tests/benchmarks/bench_celery_tables.py
	$(BIN)/python tests/benchmarks/bench_unit_overhead.py
	$(BIN)/python tests/benchmarks/bench_reuse.py
	$(BIN)/python tests/benchmarks/bench_refresh.py
	$(BIN)/python tests/benchmarks/bench_engine_shared.py
	$(BIN)/python tests/benchmarks/bench_halving.py
	$(BIN)/python tests/benchmarks/bench_null_labels.py

clean:
	rm -rf $(VENV) .foldwise .pytest_cache .mypy_cache .ruff_cache
