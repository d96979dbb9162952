"""The clean stage: raw trades in, clean trades and an audit out.

Every row read ends in exactly one place: kept, or dropped by the first
named rule it breaks, in this order:

- ``missing_field``: security, timestamp, price or size missing (common practice)
- ``outside_sample``: local date before the first or after the last month of
  the sample (these rows are accounted in the first/last partition)
- ``nonpositive``: price <= 0 or size <= 0 (common practice)
- ``outside_session``: local time outside every session of the market
  profile (common practice)
- ``duplicate``: an exact copy of an earlier record (common practice)

The audit has one row per security and local date with ``rows_read``,
``rows_kept`` and ``drop_<rule>`` for every rule; kept + dropped = read.
"""

from __future__ import annotations

from datetime import time

import polars as pl

from liqpanel.contracts import TRADES, TRADES_OPTIONAL, require_columns
from liqpanel.errors import InputError
from liqpanel.io import scan_table

RULES = ("missing_field", "outside_sample", "nonpositive", "outside_session", "duplicate")
MISSING_SECURITY = "(missing)"


def _parse_time(text: str) -> time:
    hh, mm = map(int, text.split(":"))
    return time(hh, mm)


def to_utc(expr: pl.Expr, dtype: pl.DataType, timezone: str) -> pl.Expr:
    """Timestamps as UTC: naive ones are read in the market's time zone."""
    if isinstance(dtype, pl.Datetime):
        if dtype.time_zone is None:
            expr = expr.dt.replace_time_zone(timezone, ambiguous="earliest", non_existent="null")
        return expr.dt.convert_time_zone("UTC").dt.cast_time_unit("us")
    if dtype == pl.String:
        parsed = expr.str.to_datetime(time_unit="us", strict=False, time_zone=None)
        return parsed.dt.replace_time_zone(timezone, ambiguous="earliest", non_existent="null").dt.convert_time_zone("UTC")
    raise InputError(f"timestamps must be datetimes or ISO strings, found {dtype}", column="ts")


def read_trades(path: str, mapping: dict[str, str], market: dict, where: pl.Expr | None = None) -> pl.LazyFrame:
    """Scan a trade file into the trades contract (``ts`` in UTC).

    ``where`` is an optional condition on the columns as stored (after
    renaming), applied before any conversion so the reader can skip row
    groups with it (``liqpanel.partition.month_window``).
    """
    lf = scan_table(path, mapping)
    require_columns(lf, TRADES, table="trades", path=path)
    if where is not None:
        lf = lf.filter(where)
    schema = lf.collect_schema()
    for column in ("price", "size"):
        if not schema[column].is_numeric():
            raise InputError(f"expected numbers, found {schema[column]}", path=path, column=column)
    optional = [c for c in TRADES_OPTIONAL if c in schema]
    return lf.select(
        pl.col("security").cast(pl.String),
        to_utc(pl.col("ts"), schema["ts"], market["timezone"]).alias("ts"),
        pl.col("price").cast(pl.Float64),
        pl.col("size").cast(pl.Float64),
        *[pl.col(c).cast(pl.String) for c in optional],
    )


def in_sessions(local_time: pl.Expr, sessions: list) -> pl.Expr:
    """True when a local time of day falls in any [open, close] session."""
    inside = pl.lit(False)
    for open_, close in sessions:
        inside = inside | local_time.is_between(pl.lit(_parse_time(open_)), pl.lit(_parse_time(close)), closed="both")
    return inside


def clean_trades(
    trades: pl.LazyFrame,
    market: dict,
    rules: dict,
    *,
    month: str,
    sample: tuple[str, str],
) -> tuple[pl.LazyFrame, pl.LazyFrame]:
    """Apply the cleaning rules to the trades of one month partition.

    ``month`` is 'YYYY-MM' in the market's local time; rows dated before
    ``sample[0]`` are accounted in the first partition and rows after
    ``sample[1]`` in the last, so every row read lands in one partition.
    Returns (clean trades, audit), both lazy.
    """
    tz = market["timezone"]
    local = pl.col("ts").dt.convert_time_zone(tz)
    key_cols = [c for c in trades.collect_schema().names()]
    lf = trades.with_columns(
        pl.col("security").fill_null(MISSING_SECURITY).alias("security"),
        local.dt.date().alias("date"),
        local.dt.strftime("%Y-%m").alias("_month"),
        local.dt.time().alias("_time"),
        pl.any_horizontal(pl.col("security", "ts", "price", "size").is_null()).alias("_missing"),
    )
    first, last = sample
    home = (
        pl.when(pl.col("_month").is_null()).then(pl.lit(first))
        .when(pl.col("_month") < first).then(pl.lit(first))
        .when(pl.col("_month") > last).then(pl.lit(last))
        .otherwise(pl.col("_month"))
    )
    lf = lf.filter(home == month)
    out_of_sample = (pl.col("_month") < first) | (pl.col("_month") > last)
    reason = pl.when(pl.col("_missing")).then(pl.lit("missing_field"))
    reason = reason.when(out_of_sample).then(pl.lit("outside_sample"))
    if rules.get("nonpositive", True):
        reason = reason.when((pl.col("price") <= 0) | (pl.col("size") <= 0)).then(pl.lit("nonpositive"))
    if rules.get("outside_session", True):
        reason = reason.when(~in_sessions(pl.col("_time"), market["sessions"])).then(pl.lit("outside_session"))
    lf = lf.with_columns(reason.otherwise(None).cast(pl.String).alias("drop_rule"))
    if rules.get("duplicates", True):
        survivors = pl.col("drop_rule").is_null()
        repeat = ~pl.struct(key_cols).is_first_distinct().over(survivors)
        lf = lf.with_columns(
            pl.when(survivors & repeat).then(pl.lit("duplicate")).otherwise(pl.col("drop_rule")).alias("drop_rule")
        )
    audit = (
        lf.group_by("security", "date")
        .agg(
            pl.len().cast(pl.Int64).alias("rows_read"),
            pl.col("drop_rule").is_null().sum().cast(pl.Int64).alias("rows_kept"),
            *[(pl.col("drop_rule") == rule).sum().cast(pl.Int64).alias(f"drop_{rule}") for rule in RULES],
        )
        .with_columns(pl.lit(month).alias("partition"))
        .sort("security", "date", nulls_last=True)
    )
    kept = lf.filter(pl.col("drop_rule").is_null()).select(*key_cols, "date").sort("security", "ts")
    return kept, audit


def check_conservation(audit: pl.DataFrame) -> None:
    """kept + dropped = read on every audit row, or raise."""
    dropped = pl.sum_horizontal([pl.col(f"drop_{rule}") for rule in RULES])
    bad = audit.filter(pl.col("rows_kept") + dropped != pl.col("rows_read"))
    if bad.height:
        raise AssertionError(f"audit conservation fails on {bad.height} security-days: {bad.head(3)}")
