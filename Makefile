# Two commands on a fresh machine with Python 3.11+ and make:
#   make demo   run the whole demo pipeline into results/<run-id>/
#   make test   run the test suite
#   make study  the estimator study alone, calibrated to the demo market
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
CORES ?= 2

.PHONY: demo test study bench clean-work

$(STAMP): pyproject.toml
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	@touch $(STAMP)

demo: $(STAMP)
	$(BIN)/snakemake --snakefile Snakefile --configfile config/config.yaml --cores $(CORES) --force-use-threads --rerun-incomplete --quiet rules -- all
	@echo "results: results/latest -> $$(readlink results/latest)"
	@cat results/latest/tables/regressions.md

study: $(STAMP)
	$(BIN)/liqpanel study --config config/config.yaml --cores $(CORES) --quiet rules

test: $(STAMP)
	$(BIN)/python -m pytest -q

bench: $(STAMP)
	$(BIN)/python -m bench

clean-work:
	rm -rf work .snakemake
