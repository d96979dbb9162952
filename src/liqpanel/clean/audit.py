"""What the stage keeps and counts: the kept rows in order, the audit by security, day and rule, and the conservation check."""

from __future__ import annotations

import polars as pl

from liqpanel.clean.flags import flag_quotes, flag_trades
from liqpanel.clean.rules import QUOTE_COLUMNS, RULES, TRADE_COLUMNS, month_number, months_of
from liqpanel.clean.reading import HELPER_COLUMNS


def audit_of(
    flagged: pl.DataFrame | pl.LazyFrame, table: str, *, month: str | list[str], timestamps: str = "",
    sample: tuple[str, str] | None = None,
) -> pl.LazyFrame:
    """Rows read, kept and dropped per rule, per security and local date.

    One pass over the rows counts them per security, date, rule (and whether
    a kept row had a quote); the counts are then spread into the rule columns
    on that small table. ``month`` a list of consecutive months (with the
    ``sample``): each security-day's row names its own month partition in
    ``partition`` (a local date lies in one month; a row without one in the
    first month of the sample, as in ``_partition``).
    """
    months = months_of(month)
    lf = flagged.lazy()
    names = lf.collect_schema().names()
    quoted = pl.col("_quoted") if "_quoted" in names else pl.lit(None, dtype=pl.Boolean)
    home = []
    partition = pl.lit(months[0]).alias("partition")
    if len(months) > 1:
        lo, hi = month_number(sample[0]), month_number(sample[1])
        home = [pl.col("_month").fill_null(lo).clip(lo, hi).alias("_home")]
        partition = pl.col("_home").first().replace_strict(
            {month_number(m): m for m in months}, return_dtype=pl.String).alias("partition")
    counts = lf.group_by("security", "date", "drop_rule", quoted.alias("_quoted"), *home).agg(
        pl.len().cast(pl.Int64).alias("_n"))
    n, kept = pl.col("_n"), pl.col("drop_rule").is_null()
    without = n.filter(kept & ~pl.col("_quoted")).sum()
    return (
        counts.group_by("security", "date")
        .agg(
            partition,
            n.sum().alias("rows_read"),
            n.filter(kept).sum().alias("rows_kept"),
            *[n.filter(pl.col("drop_rule") == rule).sum().alias(f"drop_{rule}") for rule in RULES],
            pl.when(pl.col("_quoted").is_null().all()).then(None).otherwise(without).cast(pl.Int64)
            .alias("kept_without_quote"),
        )
        .with_columns(pl.lit(table).alias("table"), pl.lit(timestamps).alias("timestamps"))
        .select("table", "partition", "security", "date", pl.exclude("table", "partition", "security", "date"))
        .sort("table", "security", "date", nulls_last=True)
    )


def kept_rows(flagged: pl.DataFrame | pl.LazyFrame, columns: list[str], *, month_number: bool = False) -> pl.LazyFrame:
    """The kept rows with ``columns`` (those present) and the local ``date``, in the flagged frame's order.

    ``flag_trades`` and ``flag_quotes`` leave their rows in security, time and
    input order, so the clean tables come out in that order without a sort.
    ``month_number``: also the local month number ``_month`` (a kept row's
    month partition, ``month_number``), to cut several months apart.
    """
    lf = flagged.lazy()
    names = lf.collect_schema().names()
    extra = ["_month"] if month_number else []
    return lf.filter(pl.col("drop_rule").is_null()).select(*[c for c in columns if c in names], "date", *extra)


def clean_trades(trades: pl.LazyFrame, market: dict, rules: dict, **partition) -> tuple[pl.LazyFrame, pl.LazyFrame]:
    """Apply the cleaning rules to the trades of one month partition.

    ``partition``: ``month``, ``sample`` and optionally ``quotes``, as for
    ``flag_trades``. ``month`` is 'YYYY-MM' in the market's local time; rows dated before
    ``sample[0]`` are accounted in the first partition and rows after
    ``sample[1]`` in the last, so every row read lands in one partition.
    ``quotes`` are clean quotes of the partition (optional). Rows whose
    values did not parse are dropped under ``unparseable`` here; the clean
    stage raises an error for them instead unless told to drop. Returns
    (clean trades, audit), both lazy.
    """
    flagged = flag_trades(trades, market, rules, **partition)
    extra = [c for c in trades.collect_schema().names() if c not in TRADE_COLUMNS and c not in HELPER_COLUMNS]
    return kept_rows(flagged, TRADE_COLUMNS + extra), audit_of(flagged, "trades", month=partition["month"])


def clean_quotes(
    quotes: pl.LazyFrame, market: dict, rules: dict, *, month: str, sample: tuple[str, str]
) -> tuple[pl.LazyFrame, pl.LazyFrame]:
    """Apply the quote rules to one month partition; returns (clean quotes, audit), lazy."""
    flagged = flag_quotes(quotes, market, rules, month=month, sample=sample)
    return kept_rows(flagged, QUOTE_COLUMNS), audit_of(flagged, "quotes", month=month)


def check_conservation(audit: pl.DataFrame) -> None:
    """kept + dropped = read on every audit row, or raise."""
    dropped = pl.sum_horizontal([pl.col(f"drop_{rule}") for rule in RULES if f"drop_{rule}" in audit.columns])
    bad = audit.filter(pl.col("rows_kept") + dropped != pl.col("rows_read"))
    if bad.height:
        raise AssertionError(f"audit conservation fails on {bad.height} security-days: {bad.head(3)}")
