"""Monthly high-frequency benchmarks: the daily trade-and-quote measures of
``liqpanel.bars.intraday`` averaged over the days of the month.

Each measure's monthly value is the equal-weighted mean over the month's
days on which the daily value exists (days with at least one signed trade
matched to a prevailing quote, for the spreads); the size-weighted output
is the same mean of the daily size-weighted values (daily: equal- and
size-weighted means over trades; monthly: mean of daily, as in the formula
sheet of this project). ``n_obs`` counts those days, so the measures stage's
minimum-days rule applies as for every other measure.
"""

from __future__ import annotations

from functools import partial

import polars as pl

from liqpanel.measures.plan import Plan, missing_reason, run_plan
from liqpanel.measures.registry import Measure, register


def mean_of_days_plan(column: str, *, weighted: bool = True, extra_sums: tuple[str, ...] = ()) -> Plan:
    """The monthly mean of a daily column (and of its size-weighted twin) over the days it exists.

    ``extra_sums`` names daily columns whose monthly totals are outputs too.
    """
    means = [column, *([f"{column}_size_weighted"] if weighted else [])]
    n = pl.col("n")
    return Plan(
        sums={"n": pl.col(column).is_not_null(), **{name: pl.col(name) for name in (*means, *extra_sums)},
              **{f"{name}_n": pl.col(name).is_not_null() for name in means[1:]}},
        monthly=(
            pl.when(n > 0).then(pl.col(column) / n).alias(column),
            *[pl.when(pl.col(f"{name}_n") > 0).then(pl.col(name) / pl.col(f"{name}_n")).alias(name) for name in means[1:]],
            *[pl.col(name) for name in extra_sums],
            n.cast(pl.Int64).alias("n_obs"),
            missing_reason(n == 0, "no_quoted_trades"),
        ),
    )


def _mean_of_days(daily: pl.LazyFrame, column: str, extra_sums: tuple[str, ...] = ()) -> pl.LazyFrame:
    weighted = f"{column}_size_weighted" in daily.collect_schema().names()
    return run_plan(daily, mean_of_days_plan(column, weighted=weighted, extra_sums=extra_sums))


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
    return _mean_of_days(daily, "realized_variance", ("realized_variance_returns",))


def kyle_lambda(daily: pl.LazyFrame, **_) -> pl.LazyFrame:
    """Kyle's lambda: monthly mean of the daily slopes of midpoint returns on signed order flow.

    Daily (``liqpanel.bars.intraday.kyle_lambda``): OLS slope of r_n = ln(m_n /
    m_{n-1}) on S_n = sum_k q_k sqrt(p_k size_k) over the day's 5-minute
    intervals (``bars.lambda_interval_minutes``). Units: log midpoint change
    per square root of a unit of currency; higher is less liquid. The
    high-frequency price-impact benchmark of Goyenko, Holden & Trzcinka
    (2009, from memory); Kyle, A. S. (1985), "Continuous auctions and
    insider trading", Econometrica 53(6), 1315-1335. Output
    ``kyle_lambda``; ``n_obs`` days with a slope.
    """
    return run_plan(daily, mean_of_days_plan("kyle_lambda", weighted=False))


HUANG_STOLL = "Huang & Stoll (1996), Journal of Financial Economics 41(3) (from memory)"


def _spread_measure(name, function, family, description, source=HUANG_STOLL) -> Measure:
    return Measure(
        name=name,
        function=function,
        plan=partial(mean_of_days_plan, name),
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
        plan=partial(mean_of_days_plan, "realized_variance", weighted=False, extra_sums=("realized_variance_returns",)),
        outputs=("realized_variance", "realized_variance_returns"),
        columns=("realized_variance", "realized_variance_returns"),
        source="Andersen & Bollerslev (1998), International Economic Review 39(4) (from memory)",
        family="volatility",
        min_days=15,
        description="sum of squared intraday log returns on a regular grid, monthly mean of days",
    )
)

register(
    Measure(
        name="kyle_lambda",
        function=kyle_lambda,
        plan=partial(mean_of_days_plan, "kyle_lambda", weighted=False),
        outputs=("kyle_lambda",),
        columns=("kyle_lambda",),
        source="Kyle (1985), Econometrica 53(6); daily regression as in Goyenko, Holden & Trzcinka (2009) (from memory)",
        family="impact",
        min_days=15,
        description="slope of interval midpoint returns on signed square-root dollar volume, monthly mean of days",
    )
)
