# fieldplan: every target sets itself up in .venv on a fresh machine (Python 3.11+).
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
DEMO_OUT ?= demo_plots/output

.PHONY: demo test lint bench clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

$(STAMP): pyproject.toml | $(BIN)/python
	$(BIN)/python -m pip install --quiet -e ".[test,dask,bench]"
	touch $(STAMP)

demo: $(STAMP)
	$(BIN)/fieldplan demo --out $(DEMO_OUT)/plan --force
	@echo "Demo plan written to $(DEMO_OUT)/plan"
	@if [ -f $(DEMO_OUT)/plan/map.html ]; then echo "Map: $$(cd $(DEMO_OUT)/plan && pwd)/map.html"; fi

lint: $(STAMP)
	$(BIN)/ruff check .

test: $(STAMP) lint
	$(BIN)/python -m pytest -q -p no:cacheprovider

bench: $(STAMP)
	$(BIN)/python -m benchmarks.run

clean:
	rm -rf $(VENV) $(DEMO_OUT)
