# Two commands do all set-up: `make demo` runs the main job on the built-in example and
# `make test` runs the tests. Both create a local virtual environment (.venv) on first use.

PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed-stamp
DEMO_DIR := build/demo

.PHONY: demo test lint bench clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/orbitfix check vanderpol
	$(BIN)/orbitfix gen vanderpol -o $(DEMO_DIR)
	$(BIN)/orbitfix verify vanderpol

test: $(STAMP)
	$(BIN)/ruff check .
	$(BIN)/python -m pytest

bench: $(STAMP)
	for f in tests/bench/bench_*.py; do $(BIN)/python $$f || exit 1; done

clean:
	rm -rf $(VENV) build .pytest_cache .ruff_cache
