# Two commands set up a fresh machine:
#   make run   - create .venv, install Inkcount, read the bundled sample forms
#   make test  - create .venv, install Inkcount with its test tools, run the tests
PYTHON ?= python3
VENV   ?= .venv
BIN    := $(VENV)/bin

.PHONY: run test bench clean

$(BIN)/inkcount: pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(BIN)/inkcount

run: $(BIN)/inkcount
	$(BIN)/inkcount read sample_forms/scans --out sample_values.csv --digits sample_digits.csv

test: $(BIN)/inkcount
	QT_QPA_PLATFORM=offscreen $(BIN)/python -m pytest

bench: $(BIN)/inkcount
	$(BIN)/python bench/bench_read.py
	$(BIN)/python bench/bench_model.py

clean:
	rm -rf $(VENV) build *.egg-info
