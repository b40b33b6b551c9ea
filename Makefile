# calcscout: `make demo` and `make test` each set up .venv first.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed

.PHONY: demo test test-slow bench lint clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/calcscout lint rules/demo/desugar.calc
	$(BIN)/calcscout terms rules/demo/desugar.calc surface.expr --size 4 --names 1 --count
	$(BIN)/calcscout translate rules/demo/desugar.calc desugar 'when(x, y, z)'

test: $(STAMP)
	$(BIN)/ruff check .
	$(BIN)/python -m pytest

test-slow: $(STAMP)
	$(BIN)/python -m pytest -m slow

bench: $(STAMP)
	$(BIN)/python tests/bench/run_all.py

lint: $(STAMP)
	$(BIN)/ruff check .

clean:
	rm -rf $(VENV) build *.egg-info
