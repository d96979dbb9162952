"""Closing percent quoted spread (Chung & Zhang 2014)."""

from __future__ import annotations

import polars as pl

from liqpanel.core.errors import ConfigError
from liqpanel.measures.plan import Plan, missing_reason, run_plan


def closing_spread_plan(*, max_spread: float | None = 0.5, **_) -> Plan:
    """The plan of ``closing_spread``."""
    if max_spread is not None and not max_spread > 0:
        raise ConfigError(f"measure 'closing_spread': option `max_spread` must be positive or null, got {max_spread}")
    bid, ask = pl.col("close_bid"), pl.col("close_ask")
    mid = (bid + ask) / 2.0
    spread = (ask - bid) / mid
    valid = (bid > 0) & (ask > bid)
    if max_spread is not None:
        valid = valid & (spread <= max_spread)
    n = pl.col("n")
    return Plan(
        sums={"n": valid, "sum": pl.when(valid).then(spread)},
        monthly=(
            pl.when(n > 0).then(pl.col("sum") / n).alias("closing_spread"),
            n.cast(pl.Int64).alias("n_obs"),
            missing_reason(n == 0, "no_valid_closing_quotes"),
        ),
    )


def closing_spread(daily: pl.LazyFrame, *, max_spread: float | None = 0.5) -> pl.LazyFrame:
    """Closing percent quoted spread: monthly mean of (ask - bid) / m at the close.

    Daily: (close_ask - close_bid) / m with m = (close_bid + close_ask) / 2,
    the quote prevailing at the close; kept when close_bid > 0, close_ask >
    close_bid and the spread is at most ``max_spread`` of the midpoint
    (default 0.5; Chung & Zhang 2014 drop larger spreads as errors, from
    memory; null keeps all). Monthly: equal-weighted mean over the kept days.
    Units: proportional full spread (0.01 = 1%).

    Assumption: the closing quote is representative of the day's spread.
    Daily columns ``close_bid`` and ``close_ask`` come from a daily file
    that has them, or from the bars stage (the quote prevailing at the
    day's last trade). Outputs ``closing_spread``; ``n_obs`` days kept;
    ``reason`` "no_valid_closing_quotes".

    Sources: Chung, K. H. & Zhang, H. (2014), "A simple approximation of
    intraday spreads using daily data", Journal of Financial Markets 17,
    94-120; Fong, Holden & Trzcinka (2017), Review of Finance 21(4).
    """
    return run_plan(daily, closing_spread_plan(max_spread=max_spread))


__all__ = ["closing_spread", "closing_spread_plan"]
