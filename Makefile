# Set-up and everyday commands. `make demo` and `make test` each create the local virtualenv
# (.venv) on first use and install dascreen with its test dependencies into it.
PYTHON ?= python3
VENV   ?= .venv
CORES  ?= $(shell nproc 2>/dev/null || echo 2)
BIN    := $(VENV)/bin

.PHONY: demo test test-all lint bench clean

$(BIN)/dascreen: pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test,xtb]'
	touch $@

demo: $(BIN)/dascreen   ## run the demo screen end to end into results/demo
	$(BIN)/dascreen run candidates/demo.csv --out results/demo --cores $(CORES)

test: $(BIN)/dascreen   ## the default test suite (what CI runs)
	$(BIN)/python -m pytest

test-all: $(BIN)/dascreen   ## also the slow tests (today: two dyes end to end through the engine)
	$(BIN)/python -m pytest -m ''

lint: $(BIN)/dascreen
	$(BIN)/python -m pytest -q -p no:cacheprovider tests/test_workflow_direct.py -k lint

bench: $(BIN)/dascreen
	$(BIN)/python benchmarks/rerank.py

clean:
	rm -rf results .snakemake
