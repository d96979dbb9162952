# Check the config and its inputs (every problem at once), fix the run-id and the month partitions.
import shlex
import sys

from liqpanel.core import runtime

from liqpanel.core.errors import LiqpanelError

if not config:
    sys.stderr.write("liqpanel: no config given; run with --configfile config/config.yaml\n")
    sys.exit(2)
try:
    # before anything imports polars: the table engine's thread pool is part
    # of what makes the tables identical on every machine (liqpanel.core.runtime)
    runtime.pin_engine_threads(config)
    INTERRUPTED = runtime.clear_stale_lock()

    # once per run: not again in each job's process on a cluster, nor when `liqpanel run` has just checked it
    if workflow.is_main_process and not runtime.already_checked(config):
        from liqpanel.preflight import errors, preflight, report_lines

        PROBLEMS = preflight(config, source="config", target="study" if "study_results" in sys.argv else "all")
        for line in report_lines(PROBLEMS):
            sys.stderr.write(line + "\n")
        if errors(PROBLEMS):
            sys.exit(2)

    from liqpanel.config import shares_source, validate_config
    from liqpanel.core.settings import settings_of
    from liqpanel.core.io import month_range
    from liqpanel.core.partition import spans
    from liqpanel.clean.reading import list_files
    from liqpanel.report import input_files, now, report_category, report_labels, run_id

    # a cluster job's process: the main process checked this config in full before submitting the job
    CONFIG = validate_config(config, source="config", checked_before=not workflow.is_main_process)
    # each job takes the sections it reads, as typed read-only settings (liqpanel.core.settings)
    SETTINGS = settings_of(CONFIG)
    runtime.check_work_folder(CONFIG["run"]["work_dir"], CONFIG["run"]["engine_threads"])
    if INTERRUPTED:
        runtime.remove_partial_files(CONFIG["run"]["work_dir"])
    INPUTS = input_files(CONFIG)
    RUN_ID = run_id(CONFIG)
    if workflow.is_main_process:  # the inputs' columns and first rows, once per run (not in each cluster job)
        from liqpanel.clean.job import check_inputs

        check_inputs(inputs=SETTINGS.inputs, market=SETTINGS.market)
except LiqpanelError as exc:
    sys.stderr.write(f"liqpanel: {exc}\n")
    sys.exit(2)

WORK = CONFIG["run"]["work_dir"]
RESULTS = CONFIG["run"]["results_dir"]
MONTHS = month_range(CONFIG["sample"]["start"], CONFIG["sample"]["end"])
# one job per span of months (run.span_months, a calendar year by default) and
# stage; each month is still its own partition file
SPANS = spans(MONTHS, CONFIG["run"]["span_months"])
FROM_TRADES = not CONFIG["inputs"]["daily"]
MEASURES_SPAN = CONFIG["run"].get("measures_span_months")
MEASURES_SPANS = SPANS if FROM_TRADES else spans(MONTHS, MEASURES_SPAN) if MEASURES_SPAN else [MONTHS]
STARTED = now()
COMMAND = shlex.join(sys.argv)



def expand_inputs(key):
    """The files an `inputs:` entry names (a glob expands to its files); none when unset."""
    return list_files(CONFIG["inputs"][key]) if CONFIG["inputs"].get(key) else []


wildcard_constraints:
    month=r"\d{4}-\d{2}",


def month_files(path, months):
    """``path`` (with a {month} field) of each month."""
    return [path.format(month=m) for m in months]


def month_before(span):
    """The month before a span's first, as a list: empty for the sample's first span."""
    i = MONTHS.index(span[0])
    return MONTHS[i - 1 : i]


def span_rule(stage, span):
    """The name of a span's job of ``stage``: e.g. trades_2021_01 (the span's first month)."""
    return f"{stage}_{span[0].replace('-', '_')}"


HELD = []  # marker files keeping the user's own folders in place (liqpanel.core.runtime.hold_folders)


onstart:
    runtime.claim_lock()
    HELD.extend(runtime.hold_folders(RESULTS, WORK))
    runtime.stamp_work_folder(WORK, CONFIG["run"]["engine_threads"])


onsuccess:
    runtime.release_folders(HELD)
    runtime.release_lock()


onerror:
    runtime.release_folders(HELD)
    runtime.release_lock()


# The target every run asks for (Snakemake takes no default target from an
# included file, so the Makefile and `liqpanel run` name it).
rule all:
    input:
        f"{RESULTS}/{RUN_ID}",
