# Set-up is two commands: `make demo` and `make test`. Each creates .venv when missing.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test bench clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)

$(STAMP): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/sumpwise demo

test: $(STAMP)
	$(BIN)/python -m pytest -q

bench: $(STAMP)
	$(BIN)/python benchmarks/bench_grade.py
	$(BIN)/python benchmarks/bench_spectra.py
	$(BIN)/python benchmarks/bench_ledger.py
	$(BIN)/python benchmarks/bench_report.py

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache
