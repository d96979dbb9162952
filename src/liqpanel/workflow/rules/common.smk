# Validate the config, fix the run-id and the month partitions.
import shlex
import sys

from liqpanel import runtime

from liqpanel.errors import LiqpanelError

if not config:
    sys.stderr.write("liqpanel: no config given; run with --configfile config/config.yaml\n")
    sys.exit(2)
try:
    # before anything imports polars: the table engine's thread pool is part
    # of what makes the tables identical on every machine (liqpanel.runtime)
    runtime.pin_engine_threads(config)
    INTERRUPTED = runtime.clear_stale_lock()

    from liqpanel import stages
    from liqpanel.config import validate_config
    from liqpanel.io import month_range, previous_month
    from liqpanel.readers import list_files
    from liqpanel.report import input_files, report_category, report_labels, run_id

    CONFIG = validate_config(config, source="config")
    runtime.check_work_folder(CONFIG["run"]["work_dir"], CONFIG["run"]["engine_threads"])
    if INTERRUPTED:
        runtime.remove_partial_files(CONFIG["run"]["work_dir"])
    INPUTS = input_files(CONFIG)
    RUN_ID = run_id(CONFIG)
    stages.check_inputs(CONFIG)
except LiqpanelError as exc:
    sys.stderr.write(f"liqpanel: {exc}\n")
    sys.exit(2)

WORK = CONFIG["run"]["work_dir"]
RESULTS = CONFIG["run"]["results_dir"]
MONTHS = month_range(CONFIG["sample"]["start"], CONFIG["sample"]["end"])
FROM_TRADES = not CONFIG["inputs"]["daily"]
STARTED = stages.now()
COMMAND = shlex.join(sys.argv)



def expand_inputs(key):
    """The files an `inputs:` entry names (a glob expands to its files); none when unset."""
    return list_files(CONFIG["inputs"][key]) if CONFIG["inputs"].get(key) else []


wildcard_constraints:
    month=r"\d{4}-\d{2}",


def previous_partition(path):
    """Input function: ``path`` (with a {month} field) of the previous month, none for the first."""

    def previous(wildcards):
        if wildcards.month == MONTHS[0]:
            return []
        return [path.format(month=previous_month(wildcards.month))]

    return previous


onstart:
    runtime.claim_lock()
    runtime.stamp_work_folder(WORK, CONFIG["run"]["engine_threads"])


onsuccess:
    runtime.release_lock()


onerror:
    runtime.release_lock()


# The target every run asks for (Snakemake takes no default target from an
# included file, so the Makefile and `liqpanel run` name it).
rule all:
    input:
        f"{RESULTS}/{RUN_ID}",
