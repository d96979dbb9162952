"""File-level entry points of the workflow: one function per rule.

Each function reads its input files, calls the stage's logic and writes its
outputs atomically. The Snakemake rules in ``liqpanel/workflow/rules/`` call these and
nothing else, so every stage can be run and tested without Snakemake.

The jobs are grouped by stage, in the order data flows: ``trade_jobs``
(clean and bars), ``daily_jobs`` (daily bars, or a user's daily file),
``measure_jobs``, ``panel_job``, ``model_jobs`` (models and factors),
``report_job`` and ``study_jobs``; ``shared`` holds what several of them use.

A job imports only what its stage uses: the measures (and the Gibbs
sampler's scipy), the panel, the report and the replication files are
imported inside the functions that need them, so a clean or bars job
starts without them (``python -X importtime -c "import liqpanel.stages"``).
"""

from __future__ import annotations

from liqpanel.config import shares_source
from liqpanel.stages.daily_jobs import daily_from_file, daily_month, daily_span, read_daily_file
from liqpanel.stages.measure_jobs import (
    MEASURES_BLOCK_ROWS, gather_monthly, measures_block_rows, measures_month, measures_span, measures_table,
)
from liqpanel.stages.model_jobs import factors, models
from liqpanel.stages.panel_job import panel
from liqpanel.stages.report_job import render_factors, report
from liqpanel.stages.shared import check_inputs, gather, now, read_truth
from liqpanel.stages.study_jobs import render_study, study, study_report
from liqpanel.stages.trade_jobs import ROWS_PER_PASS, bars_month, clean_month, trades_span

__all__ = [
    "MEASURES_BLOCK_ROWS", "ROWS_PER_PASS", "bars_month", "check_inputs", "clean_month", "daily_from_file",
    "daily_month", "daily_span", "factors", "gather", "gather_monthly", "measures_block_rows", "measures_month",
    "measures_span", "measures_table", "models", "now", "panel", "read_daily_file", "read_truth", "render_factors",
    "render_study", "report", "shares_source", "study", "study_report", "trades_span",
]
