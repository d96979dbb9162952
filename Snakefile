# liqpanel workflow: raw trades (or a daily file) to results/<run-id>/.
# Run with `make demo`, `liqpanel run --config FILE`, or
#   snakemake --cores 2 --force-use-threads --configfile config/config.yaml all
# (threads: the rules call polars, which releases the GIL, and spawning a
# process per job costs more than the job itself on a small market).
include: "workflow/rules/common.smk"
include: "workflow/rules/clean.smk"
include: "workflow/rules/bars.smk"
include: "workflow/rules/measures.smk"
include: "workflow/rules/panel.smk"
include: "workflow/rules/models.smk"
include: "workflow/rules/factors.smk"
include: "workflow/rules/study.smk"
include: "workflow/rules/report.smk"
