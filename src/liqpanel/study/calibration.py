"""Step 1 of the study: the conditions of every security-month of the user's market, and the audit of the months left out."""

from __future__ import annotations

from typing import Any

import polars as pl

from liqpanel.core.contracts import require_columns
from liqpanel.measures import REGISTRY, compute_monthly
from liqpanel.study.defaults import KEY, check_settings


def _market_days_in_span(daily: pl.LazyFrame, calendar=None) -> pl.LazyFrame:
    """Per security-month: the market's trading days in the month within the security's listed span.

    A market trading day is an open day of the market's calendar when one is
    given (``liqpanel.markets.trading_days``), else a date on which any
    security has a row; the listed span runs from the security's first to
    its last date in the table.
    """
    if calendar is not None:
        from liqpanel.measures.neighbours import open_day_numbers
        from liqpanel.measures.plan import open_days_listed

        base = (daily.group_by(KEY).agg(pl.col("date").min().alias("_first_date"), pl.col("date").max().alias("_last_date"))
                .sort(KEY).collect(engine="in-memory"))
        return base.select(*KEY, open_days_listed(base, open_day_numbers(calendar)).alias("n_days")).lazy()
    days = daily.select("date", "month").unique().sort("date").with_row_index("_day")
    span = days.group_by("month").agg(pl.col("_day").min().alias("_m_first"), pl.col("_day").max().alias("_m_last"))
    listed = (
        daily.group_by("security")
        .agg(pl.col("date").min().alias("date"), pl.col("date").max().alias("_last"))
        .join(days.select("date", pl.col("_day").alias("_s_first")), on="date", how="left")
        .join(days.select(pl.col("date").alias("_last"), pl.col("_day").alias("_s_last")), on="_last", how="left")
        .select("security", "_s_first", "_s_last")
    )
    n_days = (
        pl.min_horizontal("_s_last", "_m_last").cast(pl.Int64) - pl.max_horizontal("_s_first", "_m_first").cast(pl.Int64) + 1
    )
    return (
        daily.select(KEY).unique()
        .join(span, on="month", how="left")
        .join(listed, on="security", how="left")
        .select(*KEY, n_days.clip(lower_bound=0).alias("n_days"))
    )


def calibrate(
    daily: pl.LazyFrame,
    monthly: pl.DataFrame | None = None,
    *,
    study: dict[str, Any] | None = None,
    measures: dict[str, Any] | None = None,
    calendar=None,
) -> tuple[pl.DataFrame, pl.DataFrame]:
    """Conditions of every security-month of the user's data, and the audit of the rows left out.

    ``calendar``: the market's open days when its profile has a trading
    calendar (then a holiday is not in the window and an open day without
    a trade counts as one without trades); None infers the days from the data.

    Returns ``(pool, audit)``. ``pool`` has one row per calibrated
    security-month: ``security``, ``month``, ``n_days`` (window length: the
    market's trading days in the month within the security's listed span),
    ``days_traded`` (days with positive volume), ``no_trade_share`` (1 -
    days_traded / n_days), ``trades_per_day`` (trades over the month / n_days
    when the table counts trades; else -ln(no_trade_share), the Poisson rate
    whose chance of a day without a trade is that share; else, for a
    security that traded every day, ``trades_per_day_when_unknown``),
    ``trades_source``, ``daily_vol`` (the ``volatility`` measure, daily log
    units), ``spread`` and ``spread_source``, ``dollar_volume`` (mean per
    traded day, the market's currency), ``price`` (median close).

    Spread: the month's value of the monthly column ``spread_column`` (the
    high-frequency effective spread) when ``monthly`` has that column with
    any value; else the ``fallback_spread`` measure computed from the daily table, as the
    security's median over its calibrated months. ``audit`` counts the
    security-months read, kept and dropped by rule: ``too_few_trading_days``
    (fewer than ``min_days`` days with a trade), ``no_volatility`` (missing
    or zero), ``no_spread`` (missing).
    """
    s = check_settings(study)
    measures = measures or {}
    require_columns(daily, ["security", "date", "month", "high", "low", "close", "volume"], table="daily")
    names = daily.collect_schema().names()
    has_counts = "n_trades" in names
    traded = (pl.col("volume") > 0) & pl.col("close").is_not_null()
    per_month = daily.group_by(KEY).agg(
        traded.sum().cast(pl.Int64).alias("days_traded"),
        pl.col("n_trades").filter(traded).sum().cast(pl.Float64).alias("_trades") if has_counts else pl.lit(None, dtype=pl.Float64).alias("_trades"),
        (pl.col("n_trades").filter(traded).null_count() == 0).alias("_counted") if has_counts else pl.lit(False).alias("_counted"),
        pl.col("dollar_volume").filter(traded).mean().alias("dollar_volume") if "dollar_volume" in names else pl.lit(None, dtype=pl.Float64).alias("dollar_volume"),
        pl.col("close").filter(traded).median().alias("price"),
    )
    selection = {s["volatility"]: {**(measures.get(s["volatility"]) or {}), "min_days": 1}}
    use_column = (monthly is not None and s["spread_column"] in monthly.columns
                  and monthly.get_column(s["spread_column"]).drop_nulls().len() > 0)
    if not use_column:
        selection[s["fallback_spread"]] = {**(measures.get(s["fallback_spread"]) or {}), "min_days": 1}
    estimates = compute_monthly(daily, selection, calendar=calendar)
    vol_out = REGISTRY[s["volatility"]].outputs[0]
    spread_out = s["spread_column"] if use_column else REGISTRY[s["fallback_spread"]].outputs[0]
    if use_column:
        estimates = estimates.join(monthly.select(*KEY, pl.col(spread_out).cast(pl.Float64)), on=KEY, how="left")
    frame = (
        _market_days_in_span(daily, calendar)
        .join(per_month, on=KEY, how="left")
        .collect(engine="in-memory")
        .join(estimates.select(*KEY, pl.col(vol_out).alias("daily_vol"), pl.col(spread_out).alias("_spread")), on=KEY, how="left")
        .sort(KEY)
    )
    n_days = pl.col("n_days").cast(pl.Float64)
    no_trade = (1.0 - pl.col("days_traded") / n_days).clip(0.0, 1.0)
    frame = frame.with_columns(
        pl.col("n_days").clip(lower_bound=pl.col("days_traded")),
        no_trade.alias("no_trade_share"),
    ).with_columns(
        pl.when(pl.col("_counted")).then(pl.col("_trades") / pl.col("n_days"))
        .when(pl.col("no_trade_share") > 0).then(-pl.col("no_trade_share").log())
        .otherwise(pl.lit(float(s["trades_per_day_when_unknown"])))
        .alias("trades_per_day"),
        pl.when(pl.col("_counted")).then(pl.lit("trade counts"))
        .when(pl.col("no_trade_share") > 0).then(pl.lit("days without trades"))
        .otherwise(pl.lit("assumed (study.trades_per_day_when_unknown)"))
        .alias("trades_source"),
    )
    rule = (
        pl.when(pl.col("days_traded") < s["min_days"]).then(pl.lit("too_few_trading_days"))
        .when(pl.col("daily_vol").is_null() | ~(pl.col("daily_vol") > 0)).then(pl.lit("no_volatility"))
        .when(pl.col("_spread").is_null() | pl.col("_spread").is_nan()).then(pl.lit("no_spread"))
        .otherwise(None)
    )
    frame = frame.with_columns(rule.alias("_dropped"))
    if not use_column:
        # the proxy's level: the security's median over its months that pass the rules
        level = frame.filter(pl.col("_dropped").is_null()).group_by("security").agg(pl.col("_spread").median().alias("_level"))
        frame = frame.join(level, on="security", how="left").with_columns(pl.col("_level").alias("_spread"))
    spread_source = (
        f"{spread_out} (monthly column, the month's value)" if use_column
        else f"{spread_out} (security median over its months; no value in the monthly column '{s['spread_column']}')"
    )
    pool = (
        frame.filter(pl.col("_dropped").is_null())
        .select(
            *KEY, "n_days", "days_traded", "no_trade_share", "trades_per_day", "trades_source", "daily_vol",
            pl.col("_spread").clip(lower_bound=0.0).alias("spread"), pl.lit(spread_source).alias("spread_source"),
            "dollar_volume", "price",
        )
        .sort(KEY)
    )
    audit = _calibration_audit(frame)
    return pool, audit


def _calibration_audit(frame: pl.DataFrame) -> pl.DataFrame:
    rules = ("too_few_trading_days", "no_volatility", "no_spread")
    counts = {r: frame.filter(pl.col("_dropped") == r).height for r in rules}
    rows = [("read", frame.height), ("kept", frame.height - sum(counts.values()))]
    rows += [(f"dropped: {r}", counts[r]) for r in rules]
    return pl.DataFrame(
        {"security_months": [r[0] for r in rows], "count": [r[1] for r in rows]}, schema_overrides={"count": pl.Int64}
    )


def describe_conditions(frame: pl.DataFrame) -> pl.DataFrame:
    """Distribution of the calibrated (or drawn) conditions: n, mean and quantiles per variable."""
    variables = {
        "spread (% of price)": pl.col("spread") * 100.0,
        "daily volatility (%)": pl.col("daily_vol") * 100.0,
        "spread / volatility": pl.col("spread") / pl.col("daily_vol"),
        "trades per day": pl.col("trades_per_day"),
        "share of days without trades": pl.col("no_trade_share"),
        "window (trading days)": pl.col("n_days").cast(pl.Float64),
        "dollar volume per traded day": pl.col("dollar_volume"),
    }
    rows = []
    for label, expr in variables.items():
        x = frame.select(expr.alias("x")).get_column("x").drop_nulls().drop_nans()
        rows.append({
            "variable": label, "n": x.len(), "mean": x.mean(),
            **{f"p{int(q * 100):02d}": x.quantile(q, "linear") for q in (0.1, 0.25, 0.5, 0.75, 0.9)},
        })
    return pl.DataFrame(rows, schema_overrides={"n": pl.Int64})
