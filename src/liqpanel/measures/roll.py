"""Roll (1984) spread and the implied efficient-price variance."""

from __future__ import annotations

import polars as pl

from liqpanel.measures.neighbours import in_security_date_order, previous_valid_in_month

KEY = ["security", "month"]
CONVENTIONS = ("missing", "zero", "signed")
SERIES = ("log_price", "return")


def monthly_autocovariances(daily: pl.LazyFrame, x: pl.Expr) -> pl.LazyFrame:
    """gamma0, gamma1 and the count ``n_obs`` of a series within each security-month.

    gamma_k = (1/n) * sum_{t>k} (x_t - xbar)(x_{t-k} - xbar), the full-sample
    mean and divisor n (the convention of ``statsmodels.tsa.stattools.acovf``,
    adopted by this project). Nulls are skipped; the surviving observations are
    treated as consecutive. The month's mean and each day's lagged deviation
    are columns of the daily frame, so the group-by needs only sums.
    """
    daily = in_security_date_order(daily).with_columns(x.alias("_x"))
    d = pl.col("_x") - pl.col("_x").mean().over(KEY)
    frame = daily.with_columns(d.alias("_d")).with_columns(previous_valid_in_month(pl.col("_d")).alias("_d_lag"))
    n = pl.col("_x").count()
    return frame.group_by(KEY).agg(
        ((pl.col("_d") * pl.col("_d")).sum() / n).alias("gamma0"),
        ((pl.col("_d") * pl.col("_d_lag")).sum() / n).alias("gamma1"),
        n.cast(pl.Int64).alias("n_obs"),
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
    month's close.

    Outputs (per security-month): ``roll_spread`` (proportional full spread),
    ``roll_efficient_var`` (sigma_u^2 per day, in squared log-return units),
    ``n_obs`` (returns used), ``reason`` ("non_negative_autocovariance", or
    "too_few_returns" below two returns).
    """
    if series not in SERIES:
        raise ValueError(f"roll_spread: series must be one of {SERIES}, got {series!r}")
    if convention not in CONVENTIONS:
        raise ValueError(f"roll_spread: convention must be one of {CONVENTIONS}, got {convention!r}")
    x = (pl.col("ret") + 1.0).log() if series == "log_price" else pl.col("ret")
    monthly = monthly_autocovariances(daily, x)
    undefined = pl.col("gamma1") >= 0
    too_few = pl.col("n_obs") < 2  # an autocovariance needs two returns
    if convention == "missing":
        when_undefined = pl.lit(None, dtype=pl.Float64)
    elif convention == "zero":
        when_undefined = pl.lit(0.0)
    else:
        when_undefined = -2.0 * pl.col("gamma1").sqrt()
    return monthly.select(
        *KEY,
        pl.when(too_few).then(None)
        .when(undefined).then(when_undefined)
        .otherwise(2.0 * (-pl.col("gamma1")).sqrt()).alias("roll_spread"),
        pl.when(too_few).then(None).otherwise(pl.col("gamma0") + 2.0 * pl.col("gamma1")).alias("roll_efficient_var"),
        "n_obs",
        pl.when(too_few).then(pl.lit("too_few_returns"))
        .when(undefined).then(pl.lit("non_negative_autocovariance"))
        .otherwise(None).cast(pl.String).alias("reason"),
    ).sort(KEY)
