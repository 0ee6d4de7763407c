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
# Two at a time (xargs -P 2, in file order); a benchmark that starts an emulated board (found by
# what it calls) holds a lock while it runs, so two emulators never run at once: two at once lost
# a socket in run_emulated (tests/bench/bench_boards.py; the cause, pyserial emptying the input
# on open, is mended there, but they stay apart until CI has shown it). Each benchmark's output is
# printed whole, in file order, once all are done; every benchmark runs, any failure fails.
EMULATOR_CALLS := run_emulated[(]|running[(]|emulators[.]|stream_on_board[(]
QUICK_BENCH = $(wildcard tests/bench/bench_*.py)

bench-quick: $(STAMP)
	@out=$$(mktemp -d); \
	for f in $(QUICK_BENCH); do echo $$f; done | xargs -P 2 -I @ sh -c \
	    'b=$$2/$$(basename $$1); lock=; \
	    if grep -q -E "$$3" "$$1"; then lock="flock $$2/emulator"; fi; \
	    $$lock $(BIN)/python "$$1" --quick >"$$b.log" 2>&1; echo $$? >"$$b.rc"' \
	    sh @ "$$out" '$(EMULATOR_CALLS)'; \
	failed=; \
	for f in $(QUICK_BENCH); do b=$$out/$$(basename $$f); echo "== $$f --quick"; \
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
