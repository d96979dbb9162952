# Two commands on a fresh machine with Python 3.11+ and make:
#   make demo   run the whole demo pipeline into results/<run-id>/
#   make test   run the test suite
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
CORES ?= 2

.PHONY: demo test bench bench-measures clean-work

$(STAMP): pyproject.toml
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[test]'
	@touch $(STAMP)

demo: $(STAMP)
	$(BIN)/snakemake --snakefile Snakefile --configfile config/config.yaml --cores $(CORES) --force-use-threads --rerun-incomplete --quiet rules -- all
	@echo "results: results/latest -> $$(readlink results/latest)"
	@cat results/latest/tables/regressions.md

test: $(STAMP)
	$(BIN)/python -m pytest -q

bench: bench-measures

# Measures stage against a naive pandas baseline and a one-pass floor (a few minutes);
# smaller: make bench-measures BENCH_MEASURES_ARGS="--securities 500 --years 2"
bench-measures: $(STAMP)
	$(BIN)/python -m bench.measures $(BENCH_MEASURES_ARGS)

clean-work:
	rm -rf work .snakemake
