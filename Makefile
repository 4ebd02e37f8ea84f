# Two commands on a fresh machine (Python 3.11 + the system packages named in README.md):
#   make demo   set up .venv when missing, then build the invented demo week into ./sitrep-demo
#   make test   set up .venv when missing, then run the full test suite
PYTHON ?= python3.11
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test lint bench clean

$(STAMP): pyproject.toml
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e ".[test,dask]"
	@touch $(STAMP)

demo: $(STAMP)
	$(BIN)/sitrep demo --out sitrep-demo

test: $(STAMP)
	$(BIN)/python -m ruff check sitrep tests
	$(BIN)/python -m ruff format --check sitrep tests
	$(BIN)/python -m mypy
	$(BIN)/python -m pytest -q

lint: $(STAMP)
	$(BIN)/python -m ruff check sitrep tests benchmarks
	$(BIN)/python -m mypy
	$(BIN)/python -m ruff format --check sitrep tests

bench: $(STAMP)
	$(BIN)/python benchmarks/bench_analysis.py
	$(BIN)/python benchmarks/bench_ingest.py
	$(BIN)/python benchmarks/bench_full.py --sizes 50,500 --repeats 1

clean:
	rm -rf sitrep-demo build dist *.egg-info
