# liqpanel workflow: raw trades (or a daily file) to results/<run-id>/.
# Run with: snakemake --cores 2 --configfile config/config.yaml all
# (or `make demo`, or `liqpanel run --config FILE`).
include: "workflow/rules/common.smk"
include: "workflow/rules/clean.smk"
include: "workflow/rules/bars.smk"
include: "workflow/rules/measures.smk"
include: "workflow/rules/panel.smk"
include: "workflow/rules/models.smk"
include: "workflow/rules/report.smk"
