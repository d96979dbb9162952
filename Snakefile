# The liqpanel workflow, as shipped inside the package (src/liqpanel/workflow/).
# Run with `make demo`, `liqpanel run --config FILE`, or
#   snakemake --snakefile Snakefile --cores 2 --force-use-threads --configfile config/config.yaml -- all
include: "src/liqpanel/workflow/Snakefile"
