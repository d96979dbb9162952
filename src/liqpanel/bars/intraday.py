"""High-frequency benchmarks per security-day, from clean trades and quotes.

Per trade, with m the midpoint (bid + ask)/2 of the quote prevailing at the
trade (the last quote of the same security and local day at or before the
trade time minus the quote lag) and q the trade sign (``liqpanel.bars.signing``):

- quoted spread          (ask - bid) / m
- effective spread       2 q (p - m) / m
- realized spread        2 q (p - m_h) / m
- price impact           2 q (m_h - m) / m

where m_h is the midpoint prevailing ``horizon`` later on the same quote
clock. By these definitions effective = realized + price impact, trade by
trade. All are proportional to the midpoint (0.01 = 1%). The formulas are
the usual ones of the market-microstructure literature (see the formula
sheet of this project); the horizon defaults to 5 minutes (common practice).

Trades too close to the close: when trade time + horizon falls after the
close of the trade's session (a half-day close or the start of a midday
break included), ``past_close = "session_close"`` (default) takes m_h as the
last midpoint of that session, so every signed trade keeps its realized
spread and the identity holds for the daily means too; ``"exclude"`` leaves
the realized spread and price impact of such trades missing.

Per day each measure is averaged over the trades where it is defined, with
equal weights and with trade-size weights (``<measure>_size_weighted``).
``n_quoted`` counts the trades matched to a prevailing quote and
``n_signed`` those that also got a sign.

Closing quote: ``close_bid`` and ``close_ask``, the quote prevailing at the
day's last trade matched to a quote (for the closing percent quoted spread
of Chung & Zhang 2014).

Kyle's lambda (daily; Kyle 1985, in the form of Goyenko, Holden & Trzcinka
2009, from memory): the slope of the OLS regression, with an intercept, of
r_n = ln(m_n / m_{n-1}) on S_n = sum_k q_k sqrt(p_k x size_k) over the
day's intervals n of ``interval_minutes`` (default 5, clock intervals of the
trade time stamps), where m_n is the midpoint prevailing at the last quoted
trade of interval n, m_{n-1} that of the previous interval with one, and
the sum runs over the signed trades of interval n. Units: log midpoint
change per square root of a unit of currency traded; missing with fewer than
``MIN_INTERVALS`` intervals or without variation in S. ``kyle_lambda_n``
counts the intervals used.

Realized variance (daily, squared log-return units): on the grid open,
open + interval, ..., close of each session, previous-tick sampling (the
price at a grid point is the last price at or before it), the sum of squared
log changes between consecutive grid points from the first grid point that
has a price to the session close; the sessions of a day are summed (no
return spans a midday break or the night). ``realized_variance_returns`` is
the number of grid returns used. The price is the trade price or the quote
midpoint (``price: midquote``); trades outside every session are not used.
"""

from __future__ import annotations

import polars as pl

from liqpanel.markets.several import attach, local_clock, session_bound, session_index
from liqpanel.bars.signing import trade_sign

BY = ["security", "date"]
SPREAD_MEASURES = ("quoted_spread", "effective_spread", "realized_spread", "price_impact")
MIN_INTERVALS = 5  # fewest intervals of a day's Kyle's lambda regression (convention of this project)
PAST_CLOSE = ("session_close", "exclude")


def benchmark_columns() -> dict[str, pl.DataType]:
    """The daily columns of the spread benchmarks (``daily_benchmarks``), with their types."""
    columns: dict[str, pl.DataType] = {"n_quoted": pl.Int64, "n_signed": pl.Int64}
    for name in SPREAD_MEASURES:
        columns[name] = pl.Float64
        columns[f"{name}_size_weighted"] = pl.Float64
    columns["close_bid"] = pl.Float64
    columns["close_ask"] = pl.Float64
    columns["kyle_lambda"] = pl.Float64
    columns["kyle_lambda_n"] = pl.Int64
    return columns


VARIANCE_COLUMNS: dict[str, pl.DataType] = {"realized_variance": pl.Float64, "realized_variance_returns": pl.Int64}


def daily_columns() -> dict[str, pl.DataType]:
    """The columns this module adds to the daily table, with their types."""
    return {**benchmark_columns(), **VARIANCE_COLUMNS}


def with_local_date(frame: pl.LazyFrame, market: dict) -> pl.LazyFrame:
    """Add the local trading ``date`` when the frame lacks it."""
    if "date" in frame.collect_schema().names():
        return frame
    return attach(frame, market).with_columns(local_clock(pl.col("ts"), market)[0].alias("date"))


def quote_at(
    frame: pl.LazyFrame, quotes: pl.LazyFrame, at: str, names: tuple[str, str], *, in_order: bool = False
) -> pl.LazyFrame:
    """Add the bid and ask (as ``names``) prevailing at column ``at``: same security and day.

    ``in_order``: both frames are already in security and time order (as the
    clean stage keeps them) and ``at`` rises with the time, so neither is
    sorted again and the rows keep their order.
    """
    right = quotes.select(*BY, pl.col("ts").alias(at), pl.col("bid").alias(names[0]), pl.col("ask").alias(names[1]))
    if not in_order:
        right, frame = right.sort(*BY, at), frame.sort(*BY, at)
    return frame.join_asof(right, on=at, by=BY, strategy="backward", check_sortedness=False)


def prevailing_quotes(trades: pl.LazyFrame, quotes: pl.LazyFrame, lag_seconds: float, *, in_order: bool = False) -> pl.LazyFrame:
    """Trades with ``bid`` and ``ask`` of the quote prevailing at ts - lag (same security and day)."""
    lagged = trades.with_columns((pl.col("ts") - pl.duration(microseconds=round(lag_seconds * 1e6))).alias("_quote_time"))
    return quote_at(lagged, quotes, "_quote_time", ("bid", "ask"), in_order=in_order)


def trade_benchmarks(
    trades: pl.LazyFrame,
    quotes: pl.LazyFrame,
    market: dict,
    *,
    signing: str = "lee_ready",
    quote_lag_seconds: float = 0.0,
    horizon_minutes: float = 5.0,
    past_close: str = "session_close",
) -> pl.LazyFrame:
    """Per trade: quote, midpoint, sign and the four spread measures (module docstring)."""
    if past_close not in PAST_CLOSE:
        raise ValueError(f"past_close must be one of {PAST_CLOSE}, got {past_close!r}")
    trades, quotes = attach(with_local_date(trades, market), market), with_local_date(quotes, market)
    day, clock = local_clock(pl.col("ts"), market)
    horizon = pl.duration(microseconds=round(horizon_minutes * 60e6))
    close = session_bound(market, session_index(market, clock, day), day, "close")
    lag = pl.col("ts") - pl.col("_quote_time")
    frame = prevailing_quotes(trades, quotes, quote_lag_seconds).with_columns(
        ((pl.col("ts") + horizon) > close).fill_null(False).alias("_past_close"),
        (pl.min_horizontal(pl.col("ts") + horizon, close) - lag).alias("_later"),
    )
    frame = quote_at(frame, quotes, "_later", ("_bid_later", "_ask_later")).sort("security", "ts")
    mid = (pl.col("bid") + pl.col("ask")) / 2.0
    later = (pl.col("_bid_later") + pl.col("_ask_later")) / 2.0
    if past_close == "exclude":
        later = pl.when(pl.col("_past_close")).then(None).otherwise(later)
    q = pl.col("sign").cast(pl.Float64)
    return frame.with_columns(
        mid.alias("mid"),
        later.alias("mid_later"),
        trade_sign(signing, pl.col("price"), pl.col("bid"), pl.col("ask"), BY).alias("sign"),
    ).with_columns(
        ((pl.col("ask") - pl.col("bid")) / pl.col("mid")).alias("quoted_spread"),
        (2.0 * q * (pl.col("price") - pl.col("mid")) / pl.col("mid")).alias("effective_spread"),
        (2.0 * q * (pl.col("price") - pl.col("mid_later")) / pl.col("mid")).alias("realized_spread"),
        (2.0 * q * (pl.col("mid_later") - pl.col("mid")) / pl.col("mid")).alias("price_impact"),
    ).drop("_quote_time", "_later", "_past_close", "_bid_later", "_ask_later")


def _size_weighted(x: pl.Expr, size: pl.Expr) -> pl.Expr:
    defined = x.is_not_null()
    return (x * size).filter(defined).sum() / size.filter(defined).sum()


def daily_benchmarks(per_trade: pl.LazyFrame, *, interval_minutes: float = 5.0, in_order: bool = False) -> pl.LazyFrame:
    """Equal- and size-weighted daily means of the per-trade measures, the closing quote and Kyle's lambda.

    ``in_order``: ``per_trade`` is in security and time order (``trade_benchmarks`` leaves it so), so the
    closing quote is the last quoted trade's without sorting each day by time (trades at the same
    instant of a security-day share their prevailing quote, so their order does not change it).
    """
    size = pl.col("size")
    quoted = pl.col("mid").is_not_null()
    in_time = (lambda e: e) if in_order else (lambda e: e.sort_by("ts"))
    means = per_trade.group_by(BY).agg(
        quoted.sum().cast(pl.Int64).alias("n_quoted"),
        (quoted & pl.col("sign").is_not_null()).sum().cast(pl.Int64).alias("n_signed"),
        *[pl.col(m).mean().alias(m) for m in SPREAD_MEASURES],
        *[_size_weighted(pl.col(m), size).alias(f"{m}_size_weighted") for m in SPREAD_MEASURES],
        in_time(pl.col("bid")).filter(in_time(quoted)).last().alias("close_bid"),
        in_time(pl.col("ask")).filter(in_time(quoted)).last().alias("close_ask"),
    )
    return means.join(kyle_lambda(per_trade, interval_minutes=interval_minutes), on=BY, how="left")


def kyle_lambda(per_trade: pl.LazyFrame, *, interval_minutes: float = 5.0) -> pl.LazyFrame:
    """Kyle's lambda per security-day from signed trades and their prevailing midpoints (module docstring).

    ``per_trade`` has ``security``, ``date``, ``ts``, ``price``, ``size``,
    ``mid`` and ``sign`` (``trade_benchmarks``). Returns one row per
    security-day with a quoted trade: ``kyle_lambda`` and ``kyle_lambda_n``.
    """
    if not interval_minutes > 0:
        raise ValueError(f"Kyle's lambda: interval_minutes must be positive, got {interval_minutes}")
    every = f"{round(interval_minutes * 60e6)}us"
    signed = pl.col("sign").cast(pl.Float64) * (pl.col("price") * pl.col("size")).sqrt()
    intervals = (
        per_trade.filter(pl.col("mid").is_not_null() & (pl.col("mid") > 0))
        .with_columns(pl.col("ts").dt.truncate(every).alias("_interval"))
        .sort(*BY, "ts")
        .group_by(*BY, "_interval")
        .agg(pl.col("mid").last().log().alias("_log_mid"), signed.fill_null(0.0).sum().alias("_flow"))
        .sort(*BY, "_interval")
    )
    r = (pl.col("_log_mid") - pl.col("_log_mid").shift(1)).over(BY)
    pairs = intervals.with_columns(r.alias("_r")).filter(pl.col("_r").is_not_null())
    x, y = pl.col("_flow"), pl.col("_r")
    n = pl.len()
    sxx = (x * x).sum() - x.sum() * x.sum() / n
    sxy = (x * y).sum() - x.sum() * y.sum() / n
    days = per_trade.filter(pl.col("mid").is_not_null()).select(BY).unique()
    per_day = pairs.group_by(BY).agg(n.cast(pl.Int64).alias("kyle_lambda_n"), sxx.alias("_sxx"), sxy.alias("_sxy"))
    usable = (pl.col("kyle_lambda_n") >= MIN_INTERVALS) & (pl.col("_sxx") > 0)
    return days.join(per_day, on=BY, how="left").select(
        *BY,
        pl.when(usable).then(pl.col("_sxy") / pl.col("_sxx")).alias("kyle_lambda"),
        pl.col("kyle_lambda_n").fill_null(0),
    )


def realized_variance(
    prices: pl.LazyFrame, market: dict, *, interval_minutes: float = 5.0, in_order: bool = False
) -> pl.LazyFrame:
    """Daily realized variance on a regular grid with previous-tick sampling (module docstring).

    ``prices`` has ``security``, ``ts`` (UTC) and ``price``; returns one row
    per security and local day with ``realized_variance`` and
    ``realized_variance_returns``. ``in_order``: ``prices`` are already in
    security and time order (a clean partition), so they are not sorted
    again. In that order the grid points of a security come in date, session
    and point order, so the points are grouped in order of appearance
    instead of sorted.
    """
    if not interval_minutes > 0:
        raise ValueError(f"realized variance: interval_minutes must be positive, got {interval_minutes}")
    step_us = round(interval_minutes * 60e6)
    day, clock = local_clock(pl.col("ts"), market)
    frame = attach(prices, market).with_columns(day.alias("date"), session_index(market, clock, day).alias("_session")).filter(
        pl.col("_session").is_not_null() & pl.col("price").is_not_null() & (pl.col("price") > 0)
    )
    opens = session_bound(market, pl.col("_session"), pl.col("date"), "open")
    closes = session_bound(market, pl.col("_session"), pl.col("date"), "close")
    # grid point j holds the prices in (open + (j - 1) step, open + j step]; j = 0 is the open itself
    elapsed = (pl.col("ts") - opens).dt.total_microseconds()
    span = (closes - opens).dt.total_microseconds()
    frame = frame.with_columns(
        ((elapsed + step_us - 1) // step_us).alias("_point"),
        ((span + step_us - 1) // step_us).alias("_points"),
    )
    session = ["security", "date", "_session"]
    ordered = frame if in_order else frame.sort("security", "ts", maintain_order=True)
    last = ordered.group_by(*session, "_point", maintain_order=True).agg(
        pl.col("price").last().log().alias("_logp"), pl.col("_points").first()
    )
    per_session = (
        last.group_by(session, maintain_order=True)
        .agg(
            (pl.col("_logp").diff() ** 2).sum().alias("realized_variance"),
            (pl.col("_points").first() - pl.col("_point").min()).alias("realized_variance_returns"),
        )
    )
    return per_session.group_by(BY).agg(
        pl.col("realized_variance").sum(),
        pl.col("realized_variance_returns").sum().cast(pl.Int64),
    )
