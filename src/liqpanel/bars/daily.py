"""The bars stage: clean trades in, one row per security and trading day out.

Open, high, low and close are the first, highest, lowest and last trade
prices of the local trading day; volume is the sum of sizes; dollar volume
the sum of price x size, in the market's currency; VWAP = dollar volume /
volume. The return is close-to-close, simple, from the security's previous
trading day (which may lie in the previous month partition), adjusted for
splits and dividends when an adjustment file is given:

    ret_t = (close_t * split_ratio_t + dividend_t) / close_{t-1} - 1,

with split_ratio the new shares per old share and dividend the cash per old
share of the events whose ex-date lies after the previous trading day and
on or before day t (several such events: ratios multiplied, dividends
added; convention of this project). Closes stay as traded. After a whole
calendar month without a trading day the return is missing: the month
partitions look back one month only, and a table of many months follows the
same rule so that both give the same returns (convention of this project).

Where clean quotes exist, the high-frequency benchmarks of
``liqpanel.bars.intraday`` (signed trades, quoted, effective and realized
spreads, price impact) and the daily realized variance join the bars.
"""

from __future__ import annotations

from collections.abc import Iterable

import polars as pl

from liqpanel.bars import intraday
from liqpanel.core.contracts import month_of


def trading_bars(trades: pl.LazyFrame, timezone: str | None = None, *, in_order: bool = False) -> pl.LazyFrame:
    """OHLC, volume, dollar volume, VWAP and trade count per security-day.

    ``trades`` follows the trades contract; if it has no ``date`` column the
    local date is taken in ``timezone``. ``in_order``: the trades are already
    in security and time order (a clean partition is), so the days are
    aggregated in that order without sorting the security names. Otherwise
    the sort is stable: trades of one security at the same instant keep
    their order in ``trades``, so the open, the close and the sums do not
    change from one run to the next.
    """
    if "date" not in trades.collect_schema().names():
        if timezone is None:
            raise ValueError("trading_bars needs a `date` column or a timezone")
        trades = trades.with_columns(pl.col("ts").dt.convert_time_zone(timezone).dt.date().alias("date"))
    if in_order:
        days = trades.group_by("security", "date", maintain_order=True)
    else:
        days = trades.sort("security", "ts", maintain_order=True).group_by("security", "date")
    bars = (
        days.agg(
            pl.col("price").first().alias("open"),
            pl.col("price").max().alias("high"),
            pl.col("price").min().alias("low"),
            pl.col("price").last().alias("close"),
            # added in time order (liqpanel.core.stable): a parallel sum adds partial sums in an order that may
            # change from run to run, and with it the last digit
            pl.col("size").drop_nulls().cum_sum().last().alias("volume"),
            (pl.col("price") * pl.col("size")).drop_nulls().cum_sum().last().alias("dollar_volume"),
            pl.len().cast(pl.Int64).alias("n_trades"),
        )
        .with_columns(
            (pl.col("dollar_volume") / pl.col("volume")).alias("vwap"),
            month_of("date").alias("month"),
        )
    )
    return bars if in_order else bars.sort("security", "date")


def add_returns(
    bars: pl.LazyFrame, previous: pl.LazyFrame | None = None, adjustments: pl.DataFrame | None = None
) -> pl.LazyFrame:
    """Add the close-to-close simple return ``ret`` (adjusted when ``adjustments`` are given).

    ``previous`` holds earlier bars (e.g. the previous month partition); only
    each security's last close there is used, and its rows are not returned.
    ``adjustments``: ``security``, ``date`` (ex-date), ``split_ratio``,
    ``dividend`` (see the module docstring).
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
    stacked = stacked.sort("security", "date").with_columns(
        pl.col("close").shift(1).over("security").alias("_close_before"),
        pl.col("date").shift(1).over("security").alias("_date_before"),
    )
    numerator = pl.col("close")
    if adjustments is not None and adjustments.height:
        stacked = stacked.join(_events_by_bar(stacked, adjustments), on=["security", "date"], how="left")
        numerator = pl.col("close") * pl.col("_split").fill_null(1.0) + pl.col("_dividend").fill_null(0.0)
    stale = pl.col("_date_before") < month_of("date").dt.offset_by("-1mo")
    return (
        stacked.with_columns(pl.when(stale).then(None).otherwise(numerator / pl.col("_close_before") - 1.0).alias("ret"))
        .filter(~pl.col("_previous"))
        .select(*cols, "ret")
        .sort("security", "date")
    )


def _events_by_bar(stacked: pl.LazyFrame, adjustments: pl.DataFrame) -> pl.LazyFrame:
    """Split ratio and dividend per bar: events after the previous bar and on or before this one."""
    days = stacked.select("security", pl.col("date").alias("_bar"), "_date_before").sort("security", "_bar")
    events = adjustments.lazy().select(
        pl.col("security").cast(pl.String), pl.col("date").cast(pl.Date), "split_ratio", "dividend"
    )
    mapped = events.sort("security", "date").join_asof(
        days, left_on="date", right_on="_bar", by="security", strategy="forward", check_sortedness=False
    )
    return (
        mapped.filter(pl.col("_bar").is_not_null() & (pl.col("_date_before").is_null() | (pl.col("date") > pl.col("_date_before"))))
        .group_by("security", pl.col("_bar").alias("date"))
        .agg(pl.col("split_ratio").product().alias("_split"), pl.col("dividend").sum().alias("_dividend"))
    )


def daily_bars(trades: pl.LazyFrame, timezone: str | None = None) -> pl.LazyFrame:
    """The daily table (bars and returns) from a whole trade file at once."""
    return add_returns(trading_bars(trades, timezone))


BAR_OPTIONS = {
    "signing": "lee_ready",
    "quote_lag_seconds": 0.0,
    "horizon_minutes": 5.0,
    "past_close": "session_close",
    "lambda_interval_minutes": 5.0,
    "realized_variance": {"interval_minutes": 5.0, "price": "auto"},
}


def intraday_bars(
    trades: pl.LazyFrame,
    quotes: pl.LazyFrame | None,
    market: dict,
    options: dict | None = None,
    columns: Iterable[str] | None = None,
    *,
    in_order: bool = False,
) -> pl.LazyFrame:
    """Daily bars with the high-frequency benchmarks and realized variance.

    ``trades`` and ``quotes`` are clean (``liqpanel.clean``); ``quotes`` may
    be None or empty, then the benchmark columns are missing (null) and the
    realized variance uses trade prices. ``options`` as ``BAR_OPTIONS``.
    ``columns``: the daily columns wanted beyond the trading bars (see
    ``needed_columns``); the spread benchmarks are computed only when one of
    theirs is wanted, the realized variance likewise; None wants all.
    ``in_order``: the trades and quotes are in security and time order
    (``trading_bars``; clean partitions are), at least within each security-day.
    """
    options = {**BAR_OPTIONS, **(options or {})}
    rv_options = {**BAR_OPTIONS["realized_variance"], **(options.get("realized_variance") or {})}
    wanted = set(intraday.daily_columns() if columns is None else columns)
    groups = {"benchmarks": intraday.benchmark_columns(), "variance": intraday.VARIANCE_COLUMNS}
    groups = {name: group for name, group in groups.items() if wanted & set(group)}
    trades = intraday.with_local_date(trades, market)
    bars = trading_bars(trades, in_order=in_order)
    if not groups:
        return bars
    if quotes is None:
        quotes = pl.LazyFrame(schema={"security": pl.String, "date": pl.Date, "ts": pl.Datetime("us", "UTC"),
                                      "bid": pl.Float64, "ask": pl.Float64})
    quotes = intraday.with_local_date(quotes, market)
    key = ["security", "date"]
    if "benchmarks" in groups:
        per_trade = intraday.trade_benchmarks(
            trades,
            quotes,
            market,
            signing=options["signing"],
            quote_lag_seconds=float(options["quote_lag_seconds"]),
            horizon_minutes=float(options["horizon_minutes"]),
            past_close=options["past_close"],
        )
        # the daily means and Kyle's lambda both read the per-trade frame: computed once
        benchmarks = intraday.daily_benchmarks(per_trade.cache(), interval_minutes=float(options["lambda_interval_minutes"]),
                                               in_order=True)
        bars = bars.join(benchmarks, on=key, how="left")
    if "variance" in groups:
        price = rv_options["price"]
        has_quotes = quotes.select(pl.len()).collect().item() > 0
        on_quotes = price == "midquote" or (price == "auto" and has_quotes)
        if on_quotes:
            series = quotes.select("security", "ts", ((pl.col("bid") + pl.col("ask")) / 2.0).alias("price"))
        else:
            series = trades.select("security", "ts", "price")
        variance = intraday.realized_variance(series, market, interval_minutes=float(rv_options["interval_minutes"]),
                                              in_order=in_order)
        bars = bars.join(variance, on=key, how="left")
    types = {c: t for group in groups.values() for c, t in group.items()}
    return bars.with_columns([pl.col(c).cast(t) for c, t in types.items()]).sort(key)


# The high-frequency daily columns each measure reads (those of its registered
# ``columns`` that ``liqpanel.bars.intraday`` offers); a measure not listed reads none.
# Kept here so that a bars job decides its columns without importing the measure
# registry (and numpy with it); tests/test_intraday.py checks it against the registry.
BAR_COLUMNS_OF: dict[str, tuple[str, ...]] = {
    "closing_spread": ("close_bid", "close_ask"),
    "effective_spread": ("effective_spread", "effective_spread_size_weighted"),
    "kyle_lambda": ("kyle_lambda",),
    "price_impact": ("price_impact", "price_impact_size_weighted"),
    "quoted_spread": ("quoted_spread", "quoted_spread_size_weighted"),
    "realized_spread": ("realized_spread", "realized_spread_size_weighted"),
    "realized_variance": ("realized_variance", "realized_variance_returns"),
}
# the registered measures that read no high-frequency column
READS_NO_BAR_COLUMN = frozenset({
    "amihud", "amivest", "ar_spread_2day", "ar_spread_monthly", "cs_spread", "edge_spread", "effective_tick",
    "fht_spread", "gibbs_spread", "limit_days", "liu_lm", "lot_mixed", "lot_ysplit", "ps_gamma", "roll_spread",
    "spread_blend", "turnover", "vol_close", "vol_garman_klass", "vol_parkinson", "vol_rogers_satchell",
    "vol_yang_zhang", "zero_return_share", "zero_return_share_traded",
})


def needed_columns(measures: Iterable[str]) -> list[str]:
    """The high-frequency daily columns (``liqpanel.bars.intraday``) that the named measures read.

    From ``BAR_COLUMNS_OF`` when it knows every name, else from each measure's
    registered daily columns (``liqpanel.measures``); both give the same list.
    """
    names = list(measures)
    offered = intraday.daily_columns()
    if all(name in BAR_COLUMNS_OF or name in READS_NO_BAR_COLUMN for name in names):
        wanted = {c for name in names for c in BAR_COLUMNS_OF.get(name, ())}
        return [c for c in offered if c in wanted]
    from liqpanel.measures import REGISTRY

    return [c for c in offered if any(c in REGISTRY[name].columns for name in names)]
