# Two entry points, each doing all set-up from a fresh clone: `make demo` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

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

test: lint
	$(BIN)/pytest

bench: $(STAMP)
	$(BIN)/python tests/benchmarks/bench_select.py
	$(BIN)/python tests/benchmarks/bench_service.py

clean:
	rm -rf $(VENV) .foldwise .pytest_cache .mypy_cache .ruff_cache
