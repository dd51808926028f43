# Two commands do all set-up on a fresh machine: `make demo` and `make test`.
PY ?= python3.11
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test lint install clean-venv

$(BIN)/python:
	@command -v $(PY) >/dev/null 2>&1 || { echo "need $(PY) on PATH (or run: make PY=python3 ...)"; exit 2; }
	$(PY) -m venv $(VENV)
	$(BIN)/python -m pip install -q --upgrade pip

$(STAMP): $(BIN)/python pyproject.toml constraints.txt
	$(BIN)/pip install -q -c constraints.txt torch==2.13.0
	$(BIN)/pip install -q -c constraints.txt -e '.[test]'
	@touch $(STAMP)

install: $(STAMP)

demo: $(STAMP)
	$(BIN)/python -m seedsweep.runner.commands.demo

test: $(STAMP)
	$(BIN)/python -m pytest

lint: $(STAMP)
	$(BIN)/ruff check runner agents envs configs tests benchmarks examples

clean-venv:
	rm -rf $(VENV)
