"""Roll (1984) spread and the implied efficient-price variance."""

from __future__ import annotations

import polars as pl

from liqpanel.measures.neighbours import previous_valid_in_month
from liqpanel.measures.plan import Plan, log_of, month_shifted, run_plan

CONVENTIONS = ("missing", "zero", "signed")
SERIES = ("log_price", "return")


def log_return() -> pl.Expr:
    """The day's log price change ln(1 + ret) (a column ``prepare`` adds)."""
    return log_of("ret")


def autocovariance_parts(x: pl.Expr, label: str) -> tuple[tuple[dict[str, pl.Expr], ...], dict[str, pl.Expr]]:
    """Per-day columns and quantities whose monthly sums give gamma0 and gamma1 of ``x`` (``autocovariances``).

    ``label`` names the series in the intermediate columns (``_roll_x_<label>``).
    """
    xs_name, lag_name = f"_roll_x_{label}", f"_roll_lag_{label}"
    xs, lag = pl.col(xs_name), pl.col(lag_name)
    steps = (
        {xs_name: month_shifted(x)},  # variances and covariances do not change; no digits are lost
        {lag_name: previous_valid_in_month(xs)},
    )
    pair = xs.is_not_null() & lag.is_not_null()
    sums = {
        "n": xs.is_not_null(),
        "sum": xs,
        "sum_sq": xs * xs,
        "pairs": pair,
        "sum_now": pl.when(pair).then(xs),
        "sum_lag": pl.when(pair).then(lag),
        "sum_cross": xs * lag,
    }
    return steps, sums


def autocovariances() -> tuple[pl.Expr, pl.Expr]:
    """gamma0 and gamma1 from the monthly sums of ``autocovariance_sums``.

    gamma_k = (1/n) * sum_{t>k} (x_t - xbar)(x_{t-k} - xbar), the full-sample
    mean and divisor n (the convention of ``statsmodels.tsa.stattools.acovf``,
    adopted by this project). Nulls are skipped; the surviving observations are
    treated as consecutive. Expanded into sums: with m the mean and the sums
    over pairs (x_t, x_{t-1}),
    n gamma1 = sum x_t x_{t-1} - m sum x_t - m sum x_{t-1} + pairs m^2.
    """
    n = pl.col("n")
    m = pl.col("sum") / n
    gamma0 = pl.col("sum_sq") / n - m * m
    gamma1 = (pl.col("sum_cross") - m * (pl.col("sum_now") + pl.col("sum_lag")) + pl.col("pairs") * m * m) / n
    return gamma0, gamma1


def roll_spread_plan(*, series: str = "log_price", convention: str = "missing", **_) -> Plan:
    """The plan of ``roll_spread`` (see there)."""
    if series not in SERIES:
        raise ValueError(f"roll_spread: series must be one of {SERIES}, got {series!r}")
    if convention not in CONVENTIONS:
        raise ValueError(f"roll_spread: convention must be one of {CONVENTIONS}, got {convention!r}")
    x = log_return() if series == "log_price" else pl.col("ret")
    gamma0, gamma1 = autocovariances()
    undefined = gamma1 >= 0
    too_few = pl.col("n") < 2  # an autocovariance needs two returns
    if convention == "missing":
        when_undefined = pl.lit(None, dtype=pl.Float64)
    elif convention == "zero":
        when_undefined = pl.lit(0.0)
    else:
        when_undefined = -2.0 * gamma1.sqrt()
    steps, sums = autocovariance_parts(x, series)
    return Plan(
        steps=steps,
        sums=sums,
        monthly=(
            pl.when(too_few).then(None)
            .when(undefined).then(when_undefined)
            .otherwise(2.0 * (-gamma1).sqrt()).alias("roll_spread"),
            pl.when(too_few).then(None).otherwise(gamma0 + 2.0 * gamma1).alias("roll_efficient_var"),
            pl.col("n").cast(pl.Int64).alias("n_obs"),
            pl.when(too_few).then(pl.lit("too_few_returns"))
            .when(undefined).then(pl.lit("non_negative_autocovariance"))
            .otherwise(None).cast(pl.String).alias("reason"),
        ),
    )


def roll_spread(daily: pl.LazyFrame, *, series: str = "log_price", convention: str = "missing", **_) -> pl.LazyFrame:
    """Roll (1984) effective spread from daily price changes within a month.

    Model: efficient price m_t = m_{t-1} + u_t; trade price p_t = m_t + c q_t
    with q_t = +-1 equally likely. Then gamma0 = Var(dp) = 2c^2 + sigma_u^2,
    gamma1 = Cov(dp_t, dp_{t-1}) = -c^2, and

        spread = 2 * sqrt(-gamma1),   sigma_u^2 = gamma0 + 2 * gamma1.

    ``series``: "log_price" uses dp = log(1 + ret) (log price changes, so the
    spread is proportional: 0.01 = 1%); "return" uses the simple return.
    ``convention`` for gamma1 >= 0, where the estimator is undefined:
    "missing" (null, default), "zero" (0), or "signed" (-2 sqrt(gamma1)).
    The month's returns include its first day's change from the previous
    month's close. Pairs (dp_t, dp_{t-1}) are the security's consecutive
    returns in the month; with the market's calendar, a return that follows
    an open day without a trade does not pair with the one before it (the
    autocovariance leaves that product out, gamma0 keeps both returns),
    while a closed day (holiday, weekend) between them breaks nothing.
    Without a calendar every neighbouring pair of rows is a pair.

    Outputs (per security-month): ``roll_spread`` (proportional full spread),
    ``roll_efficient_var`` (sigma_u^2 per day, in squared log-return units),
    ``n_obs`` (returns used), ``reason`` ("non_negative_autocovariance", or
    "too_few_returns" below two returns).
    """
    return run_plan(daily, roll_spread_plan(series=series, convention=convention))
