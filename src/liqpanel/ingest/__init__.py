"""One way in for every input file: trades, quotes, daily, returns,
characteristics, factors, adjustments and truth.

Each input is described by a ``Layout``: where it is, how the user's columns
map to ours (``columns:``), and how its values are written (``formats:``):

- ``date_format`` (strftime, e.g. ``"%Y%m%d"`` or ``"%d/%m/%Y"``). Without
  it dates are recognised as dates or datetimes of the file, ISO text
  ``YYYY-MM-DD`` (a time after it is ignored), or ``YYYYMMDD`` as text or as
  an integer. A number is never read as a count of days since 1970. Text
  such as ``03/04/2021``, whose day and month order cannot be told, is
  refused with the file, column, row and value until a format is given.
  Month columns (returns, factors) also accept ``YYYY-MM`` and ``YYYYMM``.
- ``time_format``: the ``time`` column of a trade or quote file, or the
  whole ``ts`` column when it is text.
- ``missing``: the text tokens read as a missing value (default ``""``,
  ``NA``, ``N/A``, ``NaN``, ``nan``, ``null``, ``NULL``, ``.``).
- ``separator``: of a CSV file (default ``,``).
- ``returns_in``: ``decimal`` (0.012, the default) or ``percent`` (1.2) for
  the return columns (``ret``, ``delist_ret``, ``mkt_ret``); percent values
  are divided by 100 as they are read. A simple return below -1 (a loss of
  more than everything) cannot be, so one stops the run naming the row: the
  usual sign of a file in percent read as decimals.

CSV columns are read as text and converted by the declared schema of the
table (numbers as numbers whatever the first rows hold), so a file whose
first rows hold whole numbers reads the same as any other. A value present
that does not convert is flagged on its row (``_bad`` names our column,
``_value`` holds the text); a number that is not finite (NaN, +-inf)
becomes missing and is flagged in ``_nonfinite``. Errors name the file, the
user's own column (ours in parentheses), the row and an example value.
"""

from __future__ import annotations

from liqpanel.ingest.files import collect, damaged, list_files, open_file, require, scan_file, schema_of
from liqpanel.ingest.layout import (
    AMBIGUOUS_DATE, CSV, DEFAULT_MISSING, HELPERS, Layout, PARQUET, RETURN_COLUMNS, SCALAR_INPUTS,
    characteristics_layout, error, layout_from, layout_of,
)
from liqpanel.ingest.read import Spec, check_unique, read_checked, read_frame, sample_check, scan_frame
from liqpanel.ingest.values import date, date_problem, first_bad, impossible_return, number

__all__ = [
    "AMBIGUOUS_DATE",
    "CSV",
    "DEFAULT_MISSING",
    "HELPERS",
    "Layout",
    "PARQUET",
    "RETURN_COLUMNS",
    "SCALAR_INPUTS",
    "Spec",
    "characteristics_layout",
    "check_unique",
    "collect",
    "damaged",
    "date",
    "date_problem",
    "error",
    "first_bad",
    "impossible_return",
    "layout_from",
    "layout_of",
    "list_files",
    "number",
    "open_file",
    "read_checked",
    "read_frame",
    "require",
    "sample_check",
    "scan_frame",
    "scan_file",
    "schema_of",
]
