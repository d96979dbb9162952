"""Checks a run's config and inputs before any work starts, listing every problem.

``preflight(config)`` runs on the config as written (before defaults are
filled) and returns a list of :class:`Problem`: every schema error, every
input file that is missing or does not open, every mapped column the file
lacks, every column a table needs and will not have, dates that do not parse
on a sample of rows, a market profile that does not exist, measures whose
daily columns the inputs cannot provide, model and sort variables the panel
will not hold, measure options of the wrong type, results and work folders
that cannot be written. A sample window the data does not cover gives a
warning (``Problem.level == "warning"``), not an error.

It is cheap: files are opened for their header only (the Parquet schema, the
first line of a CSV); dates are parsed on the first rows; the date range
comes from Parquet statistics or a scan of the date column alone. Nothing is
created or deleted: a folder is tested by writing and removing a temporary
file in it (or, when it does not exist yet, in its nearest existing parent).

Checks of one input file are the functions in :data:`FILE_CHECKS`, each
``check(source: InputSource) -> list[Problem]``; :func:`check_date_sample`
is the one that parses dates on a sample.
"""

from __future__ import annotations

from liqpanel.preflight.config_checks import input_sources
from liqpanel.preflight.files import FILE_CHECKS, check_date_sample, check_files, read_header
from liqpanel.preflight.folders import writable_problem
from liqpanel.preflight.overall import errors, preflight, report_lines, warnings
from liqpanel.preflight.problem import DATE_COLUMN, InputSource, Problem, REQUIRED, SAMPLE_ROWS
from liqpanel.preflight.ranges import date_range
from liqpanel.preflight.sections import daily_columns, panel_variables

__all__ = [
    "DATE_COLUMN",
    "FILE_CHECKS",
    "InputSource",
    "Problem",
    "REQUIRED",
    "SAMPLE_ROWS",
    "check_date_sample",
    "check_files",
    "daily_columns",
    "date_range",
    "errors",
    "input_sources",
    "panel_variables",
    "preflight",
    "read_header",
    "report_lines",
    "warnings",
    "writable_problem",
]
