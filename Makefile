# Two commands do all set-up: `make demo` runs the main job on the built-in example and
# `make test` runs the tests. Both create a local virtual environment (.venv) on first use.

PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed-stamp
DEMO_DIR := build/demo
# Where the tool keeps its host builds unless ORBITFIX_CACHE says otherwise (see cache_root() in
# verify/targets/host_build.py; tests/test_doors.py checks the two agree).
HOST_CACHE := $(or $(XDG_CACHE_HOME),$(HOME)/.cache)/orbitfix/host

.PHONY: demo test test-fast lint bench bench-quick clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/orbitfix check vanderpol
	$(BIN)/orbitfix gen vanderpol -o $(DEMO_DIR)
	$(BIN)/orbitfix verify vanderpol --report $(DEMO_DIR)/report

# On every core, a test file to a worker (its module fixtures are made once); the slowest tests
# are listed at the end, to keep the suite's time in view.
test: $(STAMP)
	$(BIN)/ruff check .
	$(BIN)/python -m pytest -n auto --dist loadfile --durations=15

# The tests without the long runs marked @pytest.mark.slow (CI runs them all, with `make test`).
test-fast: $(STAMP)
	$(BIN)/python -m pytest -m "not slow"

lint: $(STAMP)
	$(BIN)/ruff check .

# Full-size figures, for people to read and quote.
bench: $(STAMP)
	for f in tests/bench/bench_*.py; do echo "== $$f"; $(BIN)/python $$f || exit 1; done

# Every benchmark once at a tiny size: a benchmark that no longer runs fails here (CI runs this).
# Two at a time: the benchmarks that start an emulated board (found by what they call) one after
# another in one lane, the others one after another in a second lane beside it, so two emulators
# never run at once: two at once lost a socket in run_emulated (tests/bench/bench_boards.py; its
# cause, pyserial emptying the input on open, is mended there, but kept apart until CI shows it).
# Each benchmark's output is printed whole, in file order, once both lanes are done; every
# benchmark runs, and any failure fails the target.
EMULATOR_CALLS := run_emulated[(]|running[(]|emulators[.]|stream_on_board[(]
EMULATED_BENCH = $(shell grep -l -E '$(EMULATOR_CALLS)' tests/bench/bench_*.py)
OTHER_BENCH = $(filter-out $(EMULATED_BENCH),$(wildcard tests/bench/bench_*.py))

bench-quick: $(STAMP)
	@out=$$(mktemp -d); \
	lane() { for f in "$$@"; do b=$$out/$$(basename $$f); \
	    $(BIN)/python $$f --quick >$$b.log 2>&1; echo $$? >$$b.rc; done; }; \
	lane $(EMULATED_BENCH) & lane $(OTHER_BENCH) & wait; \
	failed=; \
	for f in $(sort $(EMULATED_BENCH) $(OTHER_BENCH)); do b=$$out/$$(basename $$f); echo "== $$f --quick"; \
	    cat $$b.log; rc=$$(cat $$b.rc); \
	    if [ "$$rc" != 0 ]; then echo "== $$f --quick FAILED (exit $$rc)"; failed="$$failed $$f"; fi; \
	done; \
	rm -rf $$out; \
	if [ -n "$$failed" ]; then echo "bench-quick failed:$$failed"; exit 1; fi

clean:
	rm -rf $(VENV) build dist .pytest_cache .ruff_cache orbitfix.egg-info
	@echo "host-build cache: $(HOST_CACHE) (removed)"
	rm -rf "$(HOST_CACHE)"
	@if [ -n "$$ORBITFIX_CACHE" ]; then echo "ORBITFIX_CACHE is set: host builds also go to" \
	    "$$ORBITFIX_CACHE, which make clean leaves alone (remove it yourself if it is only for orbitfix)"; fi
