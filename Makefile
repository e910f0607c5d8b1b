# Two commands on a fresh machine: `make demo` and `make test`.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
TEST_STAMP := $(VENV)/.installed-test

.PHONY: demo test test-slow lint bench clean browser

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(STAMP): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e .
	touch $@

$(TEST_STAMP): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $@ $(STAMP)

demo: $(STAMP)
	$(BIN)/python -m crn.demo --out out

# The report's browser test drives Debian's chromium; installed here when missing (as root).
browser:
	@command -v chromium >/dev/null 2>&1 || { \
	  if [ "$$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then \
	    apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq chromium >/dev/null; \
	  else echo "make: no chromium and not root: the report's browser test will be skipped"; fi; }

# lint first: CI runs only `make test`, so a lint failure fails CI
test: lint browser
	$(BIN)/python -m pytest -q

# the long statistical runs (marked slow; a faster test of the same code is in `make test`)
test-slow: $(TEST_STAMP)
	$(BIN)/python -m pytest -q -m slow

# ruff (style, complexity, numpy docstrings) and mypy on the public API; both configured in
# pyproject.toml
lint: $(TEST_STAMP)
	$(BIN)/ruff check crn tests benchmarks conftest.py
	$(BIN)/mypy

bench: $(STAMP)
	for b in benchmarks/bench_*.py; do $(BIN)/python $$b || exit 1; done

clean:
	rm -rf $(VENV) out .pytest_cache .mypy_cache .ruff_cache
