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
	$(BIN)/python -m pip install --quiet -e ".[test,dask,bench,web]"
	@# Tests check kriging against scikit-gstat; it pins scipy<1.17, so it comes without dependencies
	@# (what it imports is installed above: the test extra lists imageio and tqdm for it).
	$(BIN)/python -m pip install --quiet --no-deps scikit-gstat
	touch $(STAMP)

FP := $(BIN)/fieldplan
EST := demo_plots/estate_blocks.geojson
EXCL := demo_plots/estate_exclusions.geojson

demo: $(STAMP)
	@# The demo's plans are made afresh each time: an earlier run's folders (which hold results and
	@# labels, so --force would move them aside rather than delete them) are removed first.
	rm -rf $(DEMO_OUT)
	$(FP) demo --out $(DEMO_OUT)/plan --force
	$(FP) crews $(DEMO_OUT)/plan --crews 3 --drop-off 18.89605,-33.86014 --return --force -q
	$(FP) results $(DEMO_OUT)/plan demo_plots/results_round1.csv || true
	$(FP) results $(DEMO_OUT)/plan demo_plots/results_round2.csv || true
	$(FP) estimate $(DEMO_OUT)/plan --variable brix --target 23
	$(FP) plan $(EST) --exclude $(EXCL) --spacing 100 --purpose soil --seed 7 --out $(DEMO_OUT)/soil --force -q
	$(FP) labels $(DEMO_OUT)/soil --label-sheet a4-3x8 -q
	$(FP) lab-sheet $(DEMO_OUT)/soil --analyses "pH,P,K" -q
	$(FP) plan $(EST) --spacing 60 --purpose ripeness --crop-profile wine-grapes --select "crop=wine grape" --seed 7 --out $(DEMO_OUT)/ripeness --force -q
	$(FP) labels $(DEMO_OUT)/ripeness --label-sheet letter-3x10 -q
	$(FP) zones $(EST) --covariates demo_plots/estate_eca_survey.csv demo_plots/estate_ndvi.tif --exclude $(EXCL) --zones auto --method fuzzy --min-zone-ha 0.3 --seed 7 --out $(DEMO_OUT)/zones/zones.gpkg --force -q
	$(FP) plan $(EST) --exclude $(EXCL) --zones $(DEMO_OUT)/zones/zones.gpkg --strata-by zone --design random --n 40 --allocation neyman --purpose soil --core-buffer 10 --seed 7 --out $(DEMO_OUT)/zone-soil --force -q
	@echo
	@echo "Demo plans written under $(DEMO_OUT)/: plan (grid, crews, results), soil (cores, labels, lab sheet), ripeness, zones and zone-soil (soil samples by management zone)"
	@echo "Map: $$(cd $(DEMO_OUT)/plan && pwd)/map.html"
	@echo "Workspace in the browser: $(FP) serve $(DEMO_OUT)   (then open http://127.0.0.1:8750/)"

lint: $(STAMP)
	$(BIN)/ruff check .

test: $(STAMP) lint
	$(BIN)/python -m pytest -q -p no:cacheprovider

bench: $(STAMP)
	@# The validity study reads the Meuse zinc survey shipped inside scikit-gstat (data only, no import).
	$(BIN)/python -m pip install --quiet --no-deps scikit-gstat
	$(BIN)/python -m benchmarks.run
	$(BIN)/python -m benchmarks.web_bench

clean:
	rm -rf $(VENV) $(DEMO_OUT)
