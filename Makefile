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

# Every benchmark runs and prints its figures even when an earlier one misses a goal; the
# target fails at the end, naming the ones that missed or failed.
BENCHES = bench_select bench_fixed_costs bench_service bench_celery_tables bench_unit_overhead \
	bench_reuse bench_refresh bench_engine_shared bench_halving bench_null_labels

bench: $(STAMP)
	@missed=""; for name in $(BENCHES); do \
		echo "== $$name"; \
		$(BIN)/python tests/benchmarks/$$name.py || missed="$$missed $$name"; \
	done; \
	if [ -n "$$missed" ]; then echo "goal missed or run failed in:$$missed"; exit 1; fi

clean:
	rm -rf $(VENV) .foldwise .pytest_cache .mypy_cache .ruff_cache
