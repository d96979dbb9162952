"""Days at the daily price limit and days without a range: flags of the daily table and their monthly counts.

A market with a daily price limit (profile key ``price_limit``, a fraction
of the previous close, possibly by date regime) stops prices at
P_{t-1} (1 +- limit). A day is at the limit when its close lies within half
a tick of either limit price (the tick in force there, from ``tick_size``),
or at or beyond it in a market without a tick (common practice: a close at
the limit is a locked or capped day). The previous close is the close over
1 + ret (so a split-adjusted return gives the adjusted previous close; the
first day of a security, without a return, is never at the limit). A flat
day has high = low. Both bias the range-based spread estimators, whose
``flat_days`` option can leave flat days out; ``limit_days`` counts both per
security-month.
"""

from __future__ import annotations

import polars as pl

from liqpanel.markets import limit_expr, tick_expr
from liqpanel.measures.highlow import flat_day
from liqpanel.measures.plan import Plan, missing_reason, run_plan

LIMIT_DAY = "limit_day"


def limit_day_flag(market: dict | None) -> pl.Expr:
    """True where the close is at the day's price limit (see the module docstring); False without a limit."""
    if market is None or not market.get("_limit_regimes"):
        return pl.lit(False).alias(LIMIT_DAY)
    limit = limit_expr(market)
    previous = pl.col("close") / (1.0 + pl.col("ret"))
    up, down = previous * (1.0 + limit), previous * (1.0 - limit)
    close = pl.col("close")

    def near(bound: pl.Expr, beyond: pl.Expr) -> pl.Expr:
        tick = tick_expr(market, price=bound)
        return pl.when(tick.is_null()).then(beyond).otherwise((close - bound).abs() <= tick / 2.0)

    at = near(up, close >= up) | near(down, close <= down)
    return pl.when(limit.is_not_null() & previous.is_not_null()).then(at).otherwise(False).fill_null(False).alias(
        LIMIT_DAY
    )


def limit_days_plan(**_) -> Plan:
    """The plan of ``limit_days``."""
    day = pl.col("close").is_not_null()
    return Plan(
        sums={"n": day, "limit": day & pl.col(LIMIT_DAY), "flat": day & flat_day().fill_null(False)},
        monthly=(
            pl.when(pl.col("n") > 0).then(pl.col("limit")).alias("limit_days"),
            pl.when(pl.col("n") > 0).then(pl.col("flat")).alias("flat_days"),
            pl.col("n").cast(pl.Int64).alias("n_obs"),
            missing_reason(pl.col("n") == 0, "no_closes"),
        ),
    )


def limit_days(daily: pl.LazyFrame) -> pl.LazyFrame:
    """Days at the price limit and flat days (high = low) per security-month: a diagnostic.

    Outputs ``limit_days`` (closes at the daily limit, see the module
    docstring; the daily column ``limit_day``, which the measures stage
    derives from the market profile's ``price_limit`` and ``tick_size``) and
    ``flat_days`` (days whose high equals their low: the days the range
    estimators' option ``flat_days: drop`` leaves out); ``n_obs`` days with
    a close (both missing, reason "no_closes", in a month without one).
    Source: common practice (counts).
    """
    return run_plan(daily, limit_days_plan())


__all__ = ["LIMIT_DAY", "limit_day_flag", "limit_days", "limit_days_plan"]
