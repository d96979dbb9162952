# Two commands on a fresh machine with Python 3.11+ and make:
#   make demo   run the whole demo pipeline into results/<run-id>/
#   make test   run the test suite
#   make study  the estimator study alone, calibrated to the demo market
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
CORES ?= 2

.PHONY: demo test study bench bench-measures bench-scale bench-factors cluster-test clean-work report expected verify

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

# The demo workflow through a real single-node SLURM cluster (root; CI).
$(VENV)/.installed-cluster: $(STAMP)
	$(BIN)/python -m pip install --quiet -e '.[test,cluster]'
	@touch $@

cluster-test: $(VENV)/.installed-cluster
	bash .ci/cluster-test.sh

bench: bench-measures bench-scale bench-factors

# Measures stage against a naive pandas baseline and a one-pass floor (a few minutes);
# smaller: make bench-measures BENCH_MEASURES_ARGS="--securities 500 --years 2"
bench-measures: $(STAMP)
	$(BIN)/python -m bench.measures $(BENCH_MEASURES_ARGS)

# Month partitions of 1x, 4x and 16x a base market beside a pandas script (about two minutes)
bench-scale: $(STAMP)
	$(BIN)/python -m bench.scale $(BENCH_SCALE_ARGS)

# Rolling liquidity betas: stacked fits against a loop over securities and windows (under a minute)
bench-factors: $(STAMP)
	$(BIN)/python -m bench.factors $(BENCH_FACTORS_ARGS)

clean-work:
	rm -rf work .snakemake

# Snakemake's HTML report of the demo run: every table and figure with its caption.
report: demo
	$(BIN)/snakemake --snakefile Snakefile --configfile config/config.yaml --report results/$$(readlink results/latest)-report.html -- all
	@echo "report: results/$$(readlink results/latest)-report.html"

# Compare the demo run's tables with the committed ones in tests/expected/.
verify: demo
	$(BIN)/liqpanel check-tables tests/expected results/latest --report results/table-check.json

# Refresh tests/expected/ from a demo run made from nothing (after a deliberate
# change of results; Snakemake does not rerun a stage when only code changed).
expected: $(STAMP)
	$(BIN)/snakemake --snakefile Snakefile --configfile config/config.yaml --cores $(CORES) --force-use-threads --forceall --quiet rules -- all
	rm -f tests/expected/*.csv && mkdir -p tests/expected && cp results/latest/tables/*.csv tests/expected/
