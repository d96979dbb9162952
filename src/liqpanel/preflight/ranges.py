"""The dates an input covers, from Parquet statistics or a scan of its date column, and the warnings of a sample they miss."""

from __future__ import annotations

import os

from liqpanel.preflight.files import _date_expr, _is_parquet
from liqpanel.preflight.problem import InputSource, Problem, SAMPLE_ROWS


SCAN_LIMIT_BYTES = 512 * 1024 * 1024  # larger CSV files are not scanned for their date range


def _parquet_range(file: str, column: str):
    """(first, last) date of a Parquet column from the row groups' statistics, or None when they lack them."""
    import datetime as dt

    import pyarrow.parquet as pq

    meta = pq.ParquetFile(file).metadata
    index = meta.schema.to_arrow_schema().get_field_index(column)
    if index < 0 or meta.num_row_groups == 0:
        return None
    lows, highs = [], []
    for group in range(meta.num_row_groups):
        stats = meta.row_group(group).column(index).statistics
        if stats is None or not stats.has_min_max or not isinstance(stats.min, dt.date):
            return None
        lows.append(stats.min)
        highs.append(stats.max)
    day = (lambda v: v.date() if isinstance(v, dt.datetime) else v)
    return day(min(lows)), day(max(highs))


def date_range(source: InputSource):
    """(first, last) date of an input's files, or None when unknown.

    Parquet: the row groups' statistics (else a scan of the column); CSV: a
    scan of the date column alone, for files up to :data:`SCAN_LIMIT_BYTES`.
    Trades and quotes with one timestamp column use it.
    """
    lows, highs = [], []
    for file, names in source.headers.items():
        have = {source.ours(n): n for n in names}
        ours = "ts" if source.table in ("trades", "quotes") and "ts" in have else source.date_column
        if ours not in have:
            return None
        theirs = have[ours]
        span = _parquet_range(file, theirs) if _is_parquet(file) else None
        if span is None:
            if not _is_parquet(file) and os.path.getsize(file) > SCAN_LIMIT_BYTES:
                return None
            span = _scanned_range(source, file, theirs, ours)
        if span is None:
            return None
        lows.append(span[0])
        highs.append(span[1])
    return (min(lows), max(highs)) if lows else None


def _scanned_range(source: InputSource, file: str, theirs: str, ours: str):
    import polars as pl

    if _is_parquet(file):
        lf = pl.scan_parquet(file).select(pl.col(theirs).alias("_date"))
    else:
        lf = pl.scan_csv(file, separator=source.formats.get("separator") or ",", try_parse_dates=False,
                         infer_schema_length=SAMPLE_ROWS).select(pl.col(theirs).alias("_date"))
    try:
        dtype = lf.collect_schema()["_date"]
        if ours == "ts" and dtype == pl.String:
            parsed = pl.col("_date").str.strip_chars().str.slice(0, 10).str.to_date("%Y-%m-%d", strict=False)
        else:
            parsed = _date_expr(dtype, source)
        if ours == "ts" and isinstance(dtype, pl.Datetime):
            parsed = pl.col("_date").dt.date()
        row = lf.select(parsed.min().alias("lo"), parsed.max().alias("hi")).collect().row(0)
    except pl.exceptions.PolarsError:
        return None
    return None if row[0] is None else (row[0], row[1])


def window_warnings(config: dict, sources: list[InputSource]) -> list[Problem]:
    """Warn when the data of trades, quotes, the daily file or returns does not cover the sample."""
    sample = config.get("sample") or {}
    start, end = sample.get("start"), sample.get("end")
    if not (isinstance(start, str) and isinstance(end, str)):
        return []
    warnings = []
    for source in sources:
        if source.key not in ("trades", "quotes", "daily", "returns"):
            continue
        span = date_range(source)
        if span is None:
            continue
        first, last = span[0].strftime("%Y-%m"), span[1].strftime("%Y-%m")
        if first > start or last < end:
            warnings.append(Problem(
                source.path, f"its dates run from {span[0]} to {span[1]} but the sample is {start} to {end}; "
                "months outside them will have no " + ("returns" if source.key == "returns" else "estimates"),
                column=source.theirs(source.date_column),
                level="warning",
            ))
    return warnings
