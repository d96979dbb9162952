"""The report stage: ``results/<run-id>/`` with tables, figures, data, manifest.

Run identity. The run-id is the first 12 hex digits of SHA-256 over
(the config as run, the SHA-256 of every input file, the package version),
so the same inputs give the same folder name. Two things in the config are
not hashed as written, so that the run-id does not depend on where the
files live: every input path (a string directly under ``inputs:``, the
``path`` of an entry in a list under ``inputs:``, and the market profile)
is replaced by the SHA-256 of the file's contents (a glob by the list of its
matches' checksums, in name order), and the two output locations
``run.results_dir`` and ``run.work_dir`` are left out (they change no
number). :func:`run_identity` returns exactly what is hashed; the manifest
records it, so anyone can recompute the run-id.

Tables are written as CSV (full precision), LaTeX (booktabs, decimals
aligned, caption, label and notes) and Markdown, by :class:`RunFolder`,
which also remembers each table's and figure's caption for the manifest,
the replication README and Snakemake's HTML report.
"""

from __future__ import annotations

from liqpanel.report.folders import (
    build_folder, point_latest, publish_folder, report_category, report_labels, run_folder,
)
from liqpanel.report.identity import (
    CHECKSUM_CACHE, OUTPUT_LOCATIONS, canonical_json, input_checksum, input_entries, input_files, run_id,
    run_identity,
)
from liqpanel.report.manifest import (
    DEPENDENCIES, check_identity, elapsed_seconds, git_state, input_listing, machine, now, write_manifest,
)
from liqpanel.report.notes import (
    audit_summary, currency_of, measure_sources, measure_summary, sample_note, spread_against_truth,
    standard_errors_note, timestamp_notes, units_note,
)
from liqpanel.report.plots import (
    factor_columns_text, figure_beta_portfolios, figure_cumulative, figure_market_liquidity, figure_median_spread,
    figure_proxy_scatter, label_of, liquidity_ends, portfolio_lines, sort_title,
)
from liqpanel.report.tables import (
    RunFolder, format_number, join_notes, number_in_text, to_html, to_latex, to_markdown, write_table,
)

__all__ = [
    "CHECKSUM_CACHE",
    "DEPENDENCIES",
    "OUTPUT_LOCATIONS",
    "RunFolder",
    "audit_summary",
    "build_folder",
    "canonical_json",
    "check_identity",
    "currency_of",
    "elapsed_seconds",
    "factor_columns_text",
    "figure_beta_portfolios",
    "figure_cumulative",
    "figure_market_liquidity",
    "figure_median_spread",
    "figure_proxy_scatter",
    "format_number",
    "git_state",
    "input_checksum",
    "input_entries",
    "input_files",
    "input_listing",
    "join_notes",
    "label_of",
    "liquidity_ends",
    "machine",
    "measure_sources",
    "measure_summary",
    "now",
    "number_in_text",
    "point_latest",
    "portfolio_lines",
    "publish_folder",
    "report_category",
    "report_labels",
    "run_folder",
    "run_id",
    "run_identity",
    "sample_note",
    "sort_title",
    "spread_against_truth",
    "standard_errors_note",
    "timestamp_notes",
    "to_html",
    "to_latex",
    "to_markdown",
    "units_note",
    "write_manifest",
    "write_table",
]
