# calcscout: `make demo` and `make test` each set up .venv first.
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed-$(shell cksum pyproject.toml | cut -d' ' -f1)
CALCSCOUT := $(BIN)/calcscout

.PHONY: demo test test-slow bench lint clean variants

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	rm -f $(VENV)/.installed-*
	touch $(STAMP)

# The invented demo scenario (rules/demo/): variant 1 has a planted bug that the
# check must refute (exit status 1); variant 2 is the fix and must hold (0).
demo: $(STAMP)
	$(CALCSCOUT) lint rules/demo/resugar-v2.calc
	$(CALCSCOUT) terms rules/demo/quill-calculi.calc surface.expr --size 3 --names 1
	$(CALCSCOUT) translate rules/demo/quill-calculi.calc desugar 'unless x then y else \z. z'
	$(CALCSCOUT) check rules/demo/resugar-v1.calc --quiet; test $$? -eq 1
	$(CALCSCOUT) check rules/demo/resugar-v2.calc

# Checking a folder of rule-set variants, one report each (see the README):
#   make variants VARIANTS_DIR=rules/demo -j 2
VARIANTS_DIR ?= rules/demo
VARIANT_FILES := $(wildcard $(VARIANTS_DIR)/resugar-*.calc)
VARIANT_REPORTS := $(patsubst $(VARIANTS_DIR)/%.calc,out/%.json,$(VARIANT_FILES))

variants: $(VARIANT_REPORTS)
	@for r in $^; do printf '%s: ' $$r; $(BIN)/python -c "import json,sys; d=json.load(open(sys.argv[1])); print(', '.join(c['name']+' '+c['verdict'] for c in d['claims'] if 'part_of' not in c))" $$r; done

# Exit status 1 (a refuted claim) still writes a report; 2 (bad input) stops make.
out/%.json: $(VARIANTS_DIR)/%.calc $(STAMP)
	@mkdir -p out
	$(CALCSCOUT) check $< --quiet --json $@ --junit out/$*.xml; s=$$?; [ $$s -le 1 ] || [ $$s -eq 3 ]

test: $(STAMP)
	$(BIN)/ruff check .
	$(BIN)/python -m pytest

# The exhaustive runs marked slow (pytest's exit 5, "no tests collected", is fine).
test-slow: $(STAMP)
	$(BIN)/python -m pytest -m slow; s=$$?; [ $$s -eq 0 ] || [ $$s -eq 5 ]

bench: $(STAMP)
	for b in tests/bench/bench_*.py; do echo "== $$b"; $(BIN)/python $$b || exit 1; done

lint: $(STAMP)
	$(BIN)/ruff check .

clean:
	rm -rf $(VENV) build *.egg-info
