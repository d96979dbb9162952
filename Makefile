# Two commands on a fresh machine with Python 3.11+ and make:
#   make demo   run the whole demo pipeline into results/<run-id>/
#   make test   run the test suite
#   make study  the estimator study alone, calibrated to the demo market
PYTHON ?= python3
VENV := .venv
BIN := $(VENV)/bin
STAMP := $(VENV)/.installed
CORES ?= 2
DEMO_CONFIG := config/config.yaml
# The demo's own run folder, results/<run-id of the demo config> (never
# results/latest, which follows whatever ran last). Expanded in the shell.
DEMO_RUN = $$($(BIN)/python -c 'from liqpanel.report import run_folder; print(run_folder("$(DEMO_CONFIG)"))')

.PHONY: demo test study bench bench-measures bench-scale bench-daily bench-daily-run bench-rules bench-factors cluster-test clean-work report expected verify lock wheel-test

# Exact versions from requirements.lock (made by `make lock`), then liqpanel itself.
$(STAMP): pyproject.toml requirements.lock
	@test -x $(BIN)/python || $(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -r requirements.lock
	$(BIN)/python -m pip install --quiet --no-deps -e .
	@touch $(STAMP)

# Resolve the newest versions the pyproject.toml ranges allow, with hashes, for Python 3.11 on Linux.
lock: $(STAMP)
	$(BIN)/python -m pip install --quiet 'uv>=0.9'
	$(BIN)/uv pip compile pyproject.toml --extra test --python-version 3.11 --python-platform x86_64-manylinux_2_28 \
		--generate-hashes --no-header --quiet -o requirements.lock

demo: $(STAMP)
	$(BIN)/snakemake --snakefile Snakefile --configfile $(DEMO_CONFIG) --cores $(CORES) --force-use-threads --rerun-incomplete --quiet rules -- all
	@run=$(DEMO_RUN); echo "results: $$run"; cat $$run/tables/regressions.md

study: $(STAMP)
	$(BIN)/liqpanel study --config $(DEMO_CONFIG) --cores $(CORES) --quiet rules

test: $(STAMP)
	$(BIN)/python -m pytest -q

# The demo workflow through a real single-node SLURM cluster (root; CI).
$(VENV)/.installed-cluster: $(STAMP)
	$(BIN)/python -m pip install --quiet -e '.[test,cluster]'
	@touch $@

cluster-test: $(VENV)/.installed-cluster
	bash .ci/cluster-test.sh

# A wheel installed with the locked versions into a fresh environment runs the demo config from another folder.
wheel-test:
	PYTHON=$(PYTHON) bash .ci/wheel-test.sh

bench: bench-measures bench-scale bench-daily bench-daily-run bench-rules bench-factors

# Measures stage against a naive pandas baseline and a one-pass floor (a few minutes);
# smaller: make bench-measures BENCH_MEASURES_ARGS="--securities 500 --years 2"
bench-measures: $(STAMP)
	$(BIN)/python -m bench.measures $(BENCH_MEASURES_ARGS)

# A daily file read, checked and audited once against one scan of it per month (under a minute)
bench-daily: $(STAMP)
	$(BIN)/python -m bench.daily_file $(BENCH_DAILY_ARGS)

# A daily file of 20 years, one security and 5,000, through `liqpanel run` (several minutes)
bench-daily-run: $(STAMP)
	$(BIN)/python -m bench.daily_run $(BENCH_DAILY_RUN_ARGS)

# Month partitions of 1x, 4x and 16x a base market beside a pandas script (about two minutes)
bench-scale: $(STAMP)
	$(BIN)/python -m bench.scale $(BENCH_SCALE_ARGS)

# Clean + bars of the demo's first market with every rule, this code against the span jobs before they were made faster (about a minute)
bench-rules: $(STAMP)
	$(BIN)/python -m bench.rules $(BENCH_RULES_ARGS)

# Rolling liquidity betas: stacked fits against a loop over securities and windows (under a minute)
bench-factors: $(STAMP)
	$(BIN)/python -m bench.factors $(BENCH_FACTORS_ARGS)

clean-work:
	rm -rf work .snakemake

# Snakemake's HTML report of the demo run: every table and figure with its caption.
report: demo
	run=$(DEMO_RUN); $(BIN)/snakemake --snakefile Snakefile --configfile $(DEMO_CONFIG) --report $$run-report.html -- all \
		&& echo "report: $$run-report.html"

# Compare the demo run's tables with the committed ones in tests/expected/.
verify: demo
	run=$(DEMO_RUN); $(BIN)/liqpanel check-tables tests/expected $$run --report $$run-table-check.json

# Refresh tests/expected/ from a demo run made from nothing (after a deliberate
# change of results; Snakemake does not rerun a stage when only code changed).
expected: $(STAMP)
	$(BIN)/snakemake --snakefile Snakefile --configfile $(DEMO_CONFIG) --cores $(CORES) --force-use-threads --forceall --quiet rules -- all
	run=$(DEMO_RUN); rm -f tests/expected/*.csv && mkdir -p tests/expected && cp $$run/tables/*.csv tests/expected/
