"""Every measure from a daily frame in a notebook: ``liqpanel.measures.compute``."""

from __future__ import annotations

from typing import Any, Iterable

import polars as pl

from liqpanel.bars import add_returns
from liqpanel.core.contracts import month_of, require_columns
from liqpanel.core.errors import InputError
from liqpanel.measures.liu import liu_lm12
from liqpanel.measures.registry import REGISTRY

# iterative estimators, and the blend (it needs weights): chosen by name only
BY_NAME_ONLY = frozenset({"gibbs_spread", "lot_mixed", "lot_ysplit", "spread_blend"})
TICK_MEASURES = ("effective_tick",)


def with_market_settings(selection: dict[str, Any], tick_size: float | str | None) -> dict[str, Any]:
    """``selection`` with the market's tick size given to the measures that need it, unless their options set it.

    ``tick_size``: a number, ``"column"`` (a daily ``tick_size`` column: tick regimes) or None.
    """
    out = dict(selection)
    for name in TICK_MEASURES:
        if name in out and (out[name] or {}).get("tick_size") is None and tick_size:
            out[name] = {**(out[name] or {}), "tick_size": tick_size if tick_size == "column" else float(tick_size)}
    return out


def market_inputs(
    daily: pl.LazyFrame, selection: dict[str, Any], market: dict | None, start=None, end=None
) -> tuple[pl.LazyFrame, dict[str, Any], pl.DataFrame | None]:
    """What a market profile gives the measures: (daily, selection, calendar).

    - the tick: a single tick goes to the effective tick as its option
      (``with_market_settings``); tick regimes or price bands add a daily
      ``tick_size`` column (the tick in force on the day at its close,
      ``liqpanel.markets.tick_expr``) and set the option to ``"column"``;
    - the price limit: the daily flag ``limit_day`` (``liqpanel.measures.limits``,
      False where no limit is in force), which ``limit_days`` counts;
    - the calendar: the open days ``start``..``end`` of a profile with
      ``calendar`` or ``holidays`` (``liqpanel.markets.trading_days``; the
      days before the first month are kept for the previous month's day),
      else None (the market's days come from the data).
    """
    from liqpanel.markets import has_calendar, tick_expr, tick_is_constant, trading_days
    from liqpanel.measures.limits import LIMIT_DAY, limit_day_flag

    names = daily.collect_schema().names()
    if market is None:
        if LIMIT_DAY not in names and any(LIMIT_DAY in REGISTRY[n].columns for n in selection if n in REGISTRY):
            daily = daily.with_columns(limit_day_flag(None))
        return daily, with_market_settings(selection, None), None
    if tick_is_constant(market):
        selection = with_market_settings(selection, market.get("tick_size"))
    else:
        if "tick_size" not in names:
            daily = daily.with_columns(tick_expr(market).alias("tick_size"))
        selection = with_market_settings(selection, "column")
    if LIMIT_DAY not in names:
        daily = daily.with_columns(limit_day_flag(market))
    calendar = None
    if has_calendar(market):
        if start is None or end is None:
            span = daily.select(pl.col("date").min().alias("first"), pl.col("date").max().alias("last")).collect()
            start, end = span["first"][0], span["last"][0]
        if start is not None:
            calendar = trading_days(market, start, end).select("date")
    return daily, selection, calendar


def with_twelve_month_measures(monthly: pl.DataFrame) -> pl.DataFrame:
    """Add ``liu_lm12`` (Liu 2006, over twelve months) to a monthly table that has the ``liu_lm`` components."""
    if "liu_turnover" not in monthly.columns or "liu_lm12" in monthly.columns:
        return monthly
    return monthly.join(liu_lm12(monthly), on=["security", "month"], how="left", maintain_order="left")


def _daily_frame(daily) -> tuple[pl.DataFrame, bool]:
    """The frame as polars, and whether it came from pandas."""
    if isinstance(daily, pl.LazyFrame):
        return daily.collect(), False
    if isinstance(daily, pl.DataFrame):
        return daily, False
    try:
        import pandas as pd
    except ImportError:  # pragma: no cover - pandas is a dependency
        pd = None
    if pd is not None and isinstance(daily, pd.DataFrame):
        frame = daily.reset_index() if daily.index.name in ("security", "date") or isinstance(daily.index, pd.MultiIndex) else daily
        return pl.from_pandas(frame), True
    raise InputError(f"compute: expected a pandas or polars data frame of daily rows, got {type(daily).__name__}")


def _complete(frame: pl.DataFrame) -> pl.DataFrame:
    """Fill what the daily contract derives: ``month``, ``dollar_volume`` and ``ret`` when absent."""
    require_columns(frame, ["security", "date"], table="daily")
    date = frame.schema["date"]
    if date == pl.String:
        frame = frame.with_columns(pl.col("date").str.to_date("%Y-%m-%d", strict=False))
    elif date != pl.Date:
        frame = frame.with_columns(pl.col("date").cast(pl.Date))
    bad = frame.filter(pl.col("date").is_null())
    if bad.height:
        raise InputError(f"compute: {bad.height} rows have a date that is missing or not a date, e.g. row of security "
                         f"{bad['security'][0]!r}", column="date")
    frame = frame.with_columns(pl.col("security").cast(pl.String))
    if "month" not in frame.columns:
        frame = frame.with_columns(month_of("date").alias("month"))
    elif frame.schema["month"] != pl.Date:  # a pandas round trip turns dates into time stamps
        frame = frame.with_columns(month_of(pl.col("month").cast(pl.Date)).alias("month"))
    if "dollar_volume" not in frame.columns and {"close", "volume"} <= set(frame.columns):
        frame = frame.with_columns((pl.col("close") * pl.col("volume")).alias("dollar_volume"))
    if "ret" not in frame.columns and "close" in frame.columns:
        frame = add_returns(frame.lazy()).collect()
    floats = [c for c, t in frame.schema.items() if t.is_numeric() and c not in ("n_trades",)]
    return frame.with_columns(pl.col(floats).cast(pl.Float64)).sort("security", "date")


def compute(
    daily,
    measures: Iterable[str] | dict[str, dict[str, Any] | None] | None = None,
    *,
    tick_size: float | None = None,
    market: dict | str | None = None,
    calendar=None,
):
    """Monthly measures from a daily frame, with their diagnostics: the notebook entry point.

    ``daily``: a pandas or polars data frame (or polars LazyFrame) with one
    row per security and trading day in our column names (``security``,
    ``date`` and whichever of ``open``, ``high``, ``low``, ``close``,
    ``volume``, ``ret``, ``dollar_volume``, ``shares_out``, ``close_bid``,
    ``close_ask`` and the intraday columns the measures need). ``month`` is
    derived from ``date``, ``dollar_volume`` from close x volume and ``ret``
    from the closes (the first day of each security has none) when absent.

    ``measures``: names, or a mapping of name -> options as under
    ``measures:`` in the config (``liqpanel measures`` lists them); by
    default every registered measure whose columns the frame has, except
    the iterative estimators (``gibbs_spread`` and the LOT estimators), which
    run when named, and ``spread_blend``, which needs its weights. ``tick_size``: the market's tick, for the effective tick.

    ``market``: a market profile (a shipped name, a path, or a mapping
    checked by ``liqpanel.markets.check_market``), whose tick regimes, price
    limit and trading calendar apply as in the workflow (``market_inputs``):
    with ``calendar`` or ``holidays`` in the profile, a closed day is not a
    day, an open day without a row is a day without trades, and it breaks
    the pairs of consecutive days. ``calendar``: the open days themselves
    (dates, or a frame with ``date``), instead of a profile's. Without
    either, the market's days are the dates on which any security trades.

    Returns one row per (security, month): ``n_days``, every measure's
    outputs, ``<name>_n`` (observations used) and ``<name>_reason`` (why a
    value is missing), plus ``liu_lm12`` when ``liu_lm`` is selected. A
    pandas frame in gives a pandas frame out, a polars frame a polars one.
    The numbers are those of the workflow's measures stage
    (``liqpanel.measures.compute_monthly``) on the same rows.
    """
    from liqpanel.measures import compute_monthly

    frame, from_pandas = _daily_frame(daily)
    frame = _complete(frame)
    if measures is None:
        available = set(frame.columns) | {"mkt_ret"}
        selection: dict[str, Any] = {
            name: None for name, m in REGISTRY.items() if name not in BY_NAME_ONLY and set(m.columns) <= available
        }
    elif isinstance(measures, dict):
        selection = dict(measures)
    else:
        selection = {name: None for name in measures}
    profile = _profile(market)
    daily, selection, from_profile = market_inputs(frame.lazy(), selection, profile)
    if profile is None and tick_size is not None:
        selection = with_market_settings(selection, tick_size)
    calendar = from_profile if calendar is None else calendar
    monthly = with_twelve_month_measures(compute_monthly(daily, selection, calendar=calendar))
    return monthly.to_pandas() if from_pandas else monthly


def _profile(market: dict | str | None) -> dict | None:
    """A market profile from its name or path (``liqpanel.config.load_market``) or a mapping, checked."""
    if market is None:
        return None
    if isinstance(market, dict):
        from liqpanel.markets import check_market

        return market if "_sessions" in market else check_market(market, market.get("name", "(given as a mapping)"))
    from liqpanel.config import load_market

    return load_market(str(market))


__all__ = ["compute", "market_inputs", "with_market_settings", "with_twelve_month_measures"]
