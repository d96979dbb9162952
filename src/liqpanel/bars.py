"""The bars stage: clean trades in, one row per security and trading day out.

Open, high, low and close are the first, highest, lowest and last trade
prices of the local trading day; volume is the sum of sizes; dollar volume
the sum of price x size, in the market's currency; VWAP = dollar volume /
volume. The return is close-to-close, simple, from the security's previous
trading day (which may lie in the previous month partition). After a whole
calendar month without a trading day the return is missing: the month
partitions look back one month only, and a table of many months follows the
same rule so that both give the same returns (convention of this project).
"""

from __future__ import annotations

import polars as pl

from liqpanel.contracts import month_of


def trading_bars(trades: pl.LazyFrame, timezone: str | None = None) -> pl.LazyFrame:
    """OHLC, volume, dollar volume, VWAP and trade count per security-day.

    ``trades`` follows the trades contract; if it has no ``date`` column the
    local date is taken in ``timezone``.
    """
    if "date" not in trades.collect_schema().names():
        if timezone is None:
            raise ValueError("trading_bars needs a `date` column or a timezone")
        trades = trades.with_columns(pl.col("ts").dt.convert_time_zone(timezone).dt.date().alias("date"))
    return (
        trades.sort("security", "ts")
        .group_by("security", "date")
        .agg(
            pl.col("price").first().alias("open"),
            pl.col("price").max().alias("high"),
            pl.col("price").min().alias("low"),
            pl.col("price").last().alias("close"),
            pl.col("size").sum().alias("volume"),
            (pl.col("price") * pl.col("size")).sum().alias("dollar_volume"),
            pl.len().cast(pl.Int64).alias("n_trades"),
        )
        .with_columns(
            (pl.col("dollar_volume") / pl.col("volume")).alias("vwap"),
            month_of("date").alias("month"),
        )
        .sort("security", "date")
    )


def add_returns(bars: pl.LazyFrame, previous: pl.LazyFrame | None = None) -> pl.LazyFrame:
    """Add the close-to-close simple return ``ret``.

    ``previous`` holds earlier bars (e.g. the previous month partition); only
    each security's last close there is used, and its rows are not returned.
    """
    cols = bars.collect_schema().names()
    if previous is not None:
        last = (
            previous.sort("security", "date")
            .group_by("security")
            .agg(pl.col("date").last(), pl.col("close").last())
            .with_columns(pl.lit(True).alias("_previous"))
        )
        stacked = pl.concat([last, bars.with_columns(pl.lit(False).alias("_previous"))], how="diagonal_relaxed")
    else:
        stacked = bars.with_columns(pl.lit(False).alias("_previous"))
    previous_date = pl.col("date").shift(1).over("security")
    stale = previous_date < month_of("date").dt.offset_by("-1mo")
    return (
        stacked.sort("security", "date")
        .with_columns(
            pl.when(stale)
            .then(None)
            .otherwise(pl.col("close") / pl.col("close").shift(1).over("security") - 1.0)
            .alias("ret")
        )
        .filter(~pl.col("_previous"))
        .select(*cols, "ret")
    )


def daily_bars(trades: pl.LazyFrame, timezone: str | None = None) -> pl.LazyFrame:
    """The daily table (bars and returns) from a whole trade file at once."""
    return add_returns(trading_bars(trades, timezone))
