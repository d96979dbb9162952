"""The tick size and the price limit in force on a day (and at a price), as expressions over whole columns."""

from __future__ import annotations

import polars as pl

from liqpanel.markets.profile import _checked


def _regime_expr(regimes, day: pl.Expr, value) -> pl.Expr:
    """The regime in force on ``day`` as an expression: ``value(setting)`` of the latest regime started."""
    out = pl.lit(None, dtype=pl.Float64)
    for start, setting in regimes:
        expr = value(setting)
        out = expr if start is None else pl.when(day >= pl.lit(start)).then(expr).otherwise(out)
    return out


def tick_expr(market: dict, day: pl.Expr | None = None, price: pl.Expr | None = None) -> pl.Expr:
    """The tick in force on each ``day`` (default the ``date`` column) at each ``price`` (default ``close``).

    Null where no tick is in force. A price band applies to prices below its
    bound (the last band to every higher price).
    """
    market = _checked(market)
    day = pl.col("date") if day is None else day
    price = pl.col("close") if price is None else price

    def banded(bands) -> pl.Expr:
        if bands is None:
            return pl.lit(None, dtype=pl.Float64)
        out = pl.lit(bands[-1][1])
        for below, tick in reversed(bands[:-1]):
            out = pl.when(price < below).then(pl.lit(tick)).otherwise(out)
        return out

    return _regime_expr(market["_tick_regimes"], day, banded).cast(pl.Float64)


def limit_expr(market: dict, day: pl.Expr | None = None) -> pl.Expr:
    """The daily price limit (a fraction of the previous close) in force on each ``day``; null where none."""
    market = _checked(market)
    day = pl.col("date") if day is None else day
    return _regime_expr(market["_limit_regimes"], day, lambda v: pl.lit(v, dtype=pl.Float64)).cast(pl.Float64)


def tick_is_constant(market: dict) -> bool:
    """Whether the tick is one number (or none) for every day and price: no regimes, no bands."""
    regimes = _checked(market)["_tick_regimes"]
    return not regimes or (len(regimes) == 1 and regimes[0][0] is None and len(regimes[0][1]) == 1)


def latest_tick(market: dict) -> float | None:
    """One tick for the whole sample: the latest regime's, at the highest prices (its last band); None without one."""
    regimes = _checked(market)["_tick_regimes"]
    if not regimes or regimes[-1][1] is None:
        return None
    return regimes[-1][1][-1][1]
