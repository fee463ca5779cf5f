# Two entry points do all set-up on a fresh machine: `make demo` and `make test`.
PY ?= python3
VENV ?= .venv
BIN := $(VENV)/bin

.PHONY: demo test test-slow test-all bench clean-results

$(BIN)/python:
	$(PY) -m venv $(VENV)
	$(BIN)/pip install --quiet --upgrade pip

$(VENV)/.installed: pyproject.toml | $(BIN)/python
	$(BIN)/pip install --quiet -e '.[test]'
	touch $@

demo: $(VENV)/.installed
	$(BIN)/stopwise sweep demo
	$(BIN)/stopwise ls --campaign demo --summary
	$(BIN)/stopwise report demo

test: $(VENV)/.installed
	$(BIN)/python -m pytest -q

test-slow: $(VENV)/.installed
	$(BIN)/python -m pytest -q -m slow

test-all: $(VENV)/.installed
	$(BIN)/python -m pytest -q -m ''

bench: $(VENV)/.installed
	for f in benchmarks/bench_*.py; do $(BIN)/python $$f || exit 1; done
