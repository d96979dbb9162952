"""Trade signing: who initiated each trade, +1 buyer, -1 seller, null unknown.

All three rules are polars expressions over a frame sorted by security and
time, evaluated within each security-day (``by``):

- tick test: a trade above the last different price is a buy, below it a
  sell (a zero tick takes the sign of the last non-zero tick); the first
  trades of a day, before any price change, are unsigned (convention of
  this project: signs do not carry over the overnight gap).
- Lee & Ready (1991), "Inferring trade direction from intraday data",
  Journal of Finance 46, 733-746: a trade above the prevailing midpoint is a
  buy, below it a sell, at the midpoint the tick test decides. The prevailing
  quote is the last one at or before the trade time minus a quote lag (they
  used 5 seconds for the reporting delays of their data; the lag is an
  option, 0 by default).
- Ellis, Michaely & O'Hara (2000), "The accuracy of trade classification
  rules: evidence from Nasdaq", Journal of Financial and Quantitative
  Analysis 35, 529-551: a trade at the ask is a buy, at the bid a sell,
  anything else is signed by the tick test.

Prices are compared with a relative tolerance of 1e-9 so that a midpoint
computed in floating point equals a trade price printed at it.
"""

from __future__ import annotations

import polars as pl

METHODS = ("lee_ready", "tick", "emo")
TOLERANCE = 1e-9


def _equal(a: pl.Expr, b: pl.Expr) -> pl.Expr:
    return (a - b).abs() <= TOLERANCE * b.abs()


def tick_sign(price: pl.Expr, by: list[str]) -> pl.Expr:
    """Tick test: sign of the last non-zero price change within ``by`` (null before any)."""
    change = price - price.shift(1).over(by)
    step = pl.when(change > 0).then(pl.lit(1, dtype=pl.Int8)).when(change < 0).then(pl.lit(-1, dtype=pl.Int8))
    return step.otherwise(None).forward_fill().over(by)


def lee_ready_sign(price: pl.Expr, bid: pl.Expr, ask: pl.Expr, tick: pl.Expr) -> pl.Expr:
    """Lee & Ready (1991): midpoint test, tick test at the midpoint; null without a quote."""
    mid = (bid + ask) / 2.0
    return (
        pl.when(mid.is_null()).then(None)
        .when(_equal(price, mid)).then(tick)
        .when(price > mid).then(pl.lit(1, dtype=pl.Int8))
        .otherwise(pl.lit(-1, dtype=pl.Int8))
    )


def emo_sign(price: pl.Expr, bid: pl.Expr, ask: pl.Expr, tick: pl.Expr) -> pl.Expr:
    """Ellis, Michaely & O'Hara (2000): at the ask a buy, at the bid a sell, else the tick test."""
    return (
        pl.when(ask.is_not_null() & _equal(price, ask)).then(pl.lit(1, dtype=pl.Int8))
        .when(bid.is_not_null() & _equal(price, bid)).then(pl.lit(-1, dtype=pl.Int8))
        .otherwise(tick)
    )


def trade_sign(method: str, price: pl.Expr, bid: pl.Expr, ask: pl.Expr, by: list[str]) -> pl.Expr:
    """The sign of each trade by ``method`` (one of METHODS)."""
    if method not in METHODS:
        raise ValueError(f"signing method must be one of {METHODS}, got {method!r}")
    tick = tick_sign(price, by)
    if method == "tick":
        return tick
    if method == "lee_ready":
        return lee_ready_sign(price, bid, ask, tick)
    return emo_sign(price, bid, ask, tick)
