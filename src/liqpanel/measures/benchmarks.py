"""Monthly high-frequency benchmarks: the daily trade-and-quote measures of
``liqpanel.intraday`` averaged over the days of the month.

Each measure's monthly value is the equal-weighted mean over the month's
days on which the daily value exists (days with at least one signed trade
matched to a prevailing quote, for the spreads); the size-weighted output
is the same mean of the daily size-weighted values (daily: equal- and
size-weighted means over trades; monthly: mean of daily, as in the formula
sheet of this project). ``n_obs`` counts those days, so the measures stage's
minimum-days rule applies as for every other measure.
"""

from __future__ import annotations

import polars as pl

from liqpanel.measures.registry import Measure, register

KEY = ["security", "month"]


def _mean_of_days(daily: pl.LazyFrame, column: str, extra: dict[str, pl.Expr] | None = None) -> pl.LazyFrame:
    outputs = {column: pl.col(column).mean()}
    weighted = f"{column}_size_weighted"
    if weighted in daily.collect_schema().names():
        outputs[weighted] = pl.col(weighted).mean()
    return (
        daily.group_by(KEY)
        .agg(
            *[expr.alias(name) for name, expr in outputs.items()],
            *[expr.alias(name) for name, expr in (extra or {}).items()],
            pl.col(column).is_not_null().sum().cast(pl.Int64).alias("n_obs"),
        )
        .with_columns(
            pl.when(pl.col("n_obs") == 0).then(pl.lit("no_quoted_trades")).otherwise(None).cast(pl.String).alias("reason")
        )
    )


def effective_spread(daily: pl.LazyFrame, **_) -> pl.LazyFrame:
    """Effective spread: monthly mean of daily means of 2 q (p - m) / m.

    p trade price, m midpoint of the prevailing quote, q = +1 for a buy and
    -1 for a sell (signed by Lee & Ready 1991 by default). Proportional full
    spread (0.01 = 1%). Assumes the prevailing quote is the one the trade
    met (see the quote lag). Outputs ``effective_spread`` (daily means with
    equal weights per trade) and ``effective_spread_size_weighted``.
    """
    return _mean_of_days(daily, "effective_spread")


def quoted_spread(daily: pl.LazyFrame, **_) -> pl.LazyFrame:
    """Quoted spread at trade times: monthly mean of daily means of (ask - bid) / m.

    Proportional (0.01 = 1%); equal- and trade-size-weighted over the trades
    of a day. Outputs ``quoted_spread`` and ``quoted_spread_size_weighted``.
    """
    return _mean_of_days(daily, "quoted_spread")


def realized_spread(daily: pl.LazyFrame, **_) -> pl.LazyFrame:
    """Realized spread: monthly mean of daily means of 2 q (p - m_h) / m.

    m_h is the midpoint prevailing the configured horizon after the trade
    (5 minutes by default; see ``bars.past_close`` for trades near the
    close). The revenue of a liquidity supplier who unwinds at m_h;
    effective spread = realized spread + price impact, trade by trade.
    Proportional (0.01 = 1%). Outputs ``realized_spread`` and
    ``realized_spread_size_weighted``.
    """
    return _mean_of_days(daily, "realized_spread")


def price_impact(daily: pl.LazyFrame, **_) -> pl.LazyFrame:
    """Price impact: monthly mean of daily means of 2 q (m_h - m) / m.

    The permanent part of the effective spread: how far the midpoint moves
    in the trade's direction over the horizon. Proportional (0.01 = 1%).
    Outputs ``price_impact`` and ``price_impact_size_weighted``.
    """
    return _mean_of_days(daily, "price_impact")


def realized_variance(daily: pl.LazyFrame, **_) -> pl.LazyFrame:
    """Realized variance: monthly mean of the daily sums of squared intraday log returns.

    Daily: previous-tick sampling on a regular grid within each session
    (5 minutes by default), sum of squared log changes (Andersen &
    Bollerslev 1998, from memory). Units: daily variance of log returns over
    the trading sessions (the overnight change is not included). Outputs
    ``realized_variance`` and ``realized_variance_returns`` (grid returns
    used over the month).
    """
    extra = {"realized_variance_returns": pl.col("realized_variance_returns").sum().cast(pl.Float64)}
    return _mean_of_days(daily, "realized_variance", extra)


HUANG_STOLL = "Huang & Stoll (1996), Journal of Financial Economics 41(3) (from memory)"


def _spread_measure(name, function, family, description, source=HUANG_STOLL) -> Measure:
    return Measure(
        name=name,
        function=function,
        outputs=(name, f"{name}_size_weighted"),
        columns=(name, f"{name}_size_weighted"),
        source=source,
        family=family,
        min_days=15,
        description=description,
    )


register(_spread_measure("effective_spread", effective_spread, "spread", "2 q (p - m) / m, daily mean, monthly mean of days"))
register(_spread_measure("quoted_spread", quoted_spread, "spread", "(ask - bid) / m at trade times", "common practice"))
register(_spread_measure("realized_spread", realized_spread, "impact", "2 q (p - m_h) / m, horizon in bars.horizon_minutes"))
register(_spread_measure("price_impact", price_impact, "impact", "2 q (m_h - m) / m, horizon in bars.horizon_minutes"))
register(
    Measure(
        name="realized_variance",
        function=realized_variance,
        outputs=("realized_variance", "realized_variance_returns"),
        columns=("realized_variance", "realized_variance_returns"),
        source="Andersen & Bollerslev (1998), International Economic Review 39(4) (from memory)",
        family="volatility",
        min_days=15,
        description="sum of squared intraday log returns on a regular grid, monthly mean of days",
    )
)
