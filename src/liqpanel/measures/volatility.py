"""Monthly volatility from daily prices: close-to-close and range estimators.

Every estimator works on natural logs of the daily prices, estimates the
variance of one day's log price change within the month, and reports its
square root (a daily volatility in log-return units, 0.02 = 2% per day).
With ``annualise=True`` the variance is multiplied by ``trading_days``
(default 252, common practice) before the square root.

Which part of the day each estimator measures:

- close-to-close: the whole day (overnight plus trading hours);
- Parkinson, Garman-Klass, Rogers-Satchell: the trading hours only
  (open to close), from the day's own open, high, low and close;
- Yang-Zhang: the whole day, from the overnight move and the trading hours.

The range estimators assume the log price follows a Brownian motion that is
observed continuously while the market is open. With discrete trades the
observed high is below and the low above the true extremes, so they are
biased down at low trading intensity; bid-ask bounce biases them (and the
close-to-close variance) up. Both biases are documented in the sources.

Convention of this project for the overnight move of Yang-Zhang: the
previous close is that of the security's previous trading day within the
same month; a month's first day has no overnight move, so each month is
self-contained.

Each function returns one row per (security, month) of the input with its
output column, ``n_obs`` (the days used) and ``reason`` (null when the
value is present).
"""

from __future__ import annotations

import math

import polars as pl

from liqpanel.core.contracts import require_columns
from liqpanel.core.errors import ConfigError
from liqpanel.measures.neighbours import previous_in_month
from liqpanel.measures.plan import Plan, log_of, missing_reason, run_plan
from liqpanel.measures.roll import autocovariance_parts, log_return

LN2 = math.log(2.0)
PARKINSON_CONSTANT = 4.0 * LN2


def _volatility_plan(sums: dict[str, pl.Expr], variance: pl.Expr, output: str, *, min_obs: int,
                     annualise: bool = False, trading_days: int = 252,
                     steps: tuple[dict[str, pl.Expr], ...] = ()) -> Plan:
    """A volatility from monthly sums: sqrt(max(variance, 0) x scale) where ``n`` >= ``min_obs``."""
    if trading_days <= 0:
        raise ConfigError(f"measure '{output}': option `trading_days` must be positive, got {trading_days}")
    scale = float(trading_days) if annualise else 1.0
    enough = pl.col("n") >= min_obs
    return Plan(
        steps=steps,
        sums=sums,
        monthly=(
            pl.when(enough).then((variance * scale).clip(lower_bound=0.0).sqrt()).otherwise(None)
            .cast(pl.Float64).alias(output),
            pl.col("n").cast(pl.Int64).alias("n_obs"),
            missing_reason(~enough, "too_few_observations" if min_obs > 1 else "no_valid_days"),
        ),
    )


def _mean_piece_plan(piece: pl.Expr, output: str, **options) -> Plan:
    """A variance that is the month's mean of a per-day piece (``options`` as for ``_volatility_plan``)."""
    return _volatility_plan({"sum": piece, "n": piece.is_not_null()}, pl.col("sum") / pl.col("n"), output,
                            min_obs=1, **options)


def _sample_variance(n: pl.Expr, total: pl.Expr, squares: pl.Expr) -> pl.Expr:
    """Sample variance (divisor n - 1) from a count, a sum and a sum of squares."""
    return (squares - total * total / n) / (n - 1.0)


def close_to_close_plan(*, annualise: bool = False, trading_days: int = 252) -> Plan:
    """The plan of ``close_to_close_volatility``; its sums are those of the Roll estimator."""
    steps, sums = autocovariance_parts(log_return(), "log_price")
    sums = {k: v for k, v in sums.items() if k in ("n", "sum", "sum_sq")}
    variance = _sample_variance(pl.col("n"), pl.col("sum"), pl.col("sum_sq"))
    return _volatility_plan(sums, variance, "vol_close", min_obs=2, annualise=annualise, trading_days=trading_days,
                            steps=steps[:1])


def parkinson_plan(**options) -> Plan:
    """The plan of ``parkinson_volatility``."""
    return _mean_piece_plan((log_of("high") - log_of("low")) ** 2 / PARKINSON_CONSTANT, "vol_parkinson", **options)


def garman_klass_plan(**options) -> Plan:
    """The plan of ``garman_klass_volatility``."""
    piece = 0.5 * (log_of("high") - log_of("low")) ** 2 - (2.0 * LN2 - 1.0) * (log_of("close") - log_of("open")) ** 2
    return _mean_piece_plan(piece, "vol_garman_klass", **options)


def rogers_satchell_plan(**options) -> Plan:
    """The plan of ``rogers_satchell_volatility``."""
    return _mean_piece_plan(pl.col("_rs_piece"), "vol_rogers_satchell", steps=({"_rs_piece": _rogers_satchell_piece()},),
                            **options)


def yang_zhang_plan(**options) -> Plan:
    """The plan of ``yang_zhang_volatility``."""
    paired = pl.col("_yz_paired")
    steps = (
        {"_rs_piece": _rogers_satchell_piece(), "_yz_previous_close": previous_in_month(log_of("close"))},
        {"_yz_paired": pl.col("_yz_previous_close").is_not_null() & pl.col("_rs_piece").is_not_null()},
        {"_yz_overnight": pl.when(paired).then(log_of("open") - pl.col("_yz_previous_close")),
         "_yz_open_close": pl.when(paired).then(log_of("close") - log_of("open"))},
    )
    overnight, open_close = pl.col("_yz_overnight"), pl.col("_yz_open_close")
    sums = {"n": paired, "overnight": overnight, "overnight_sq": overnight * overnight,
            "open_close": open_close, "open_close_sq": open_close * open_close, "rs": pl.when(paired).then(pl.col("_rs_piece"))}
    n = pl.col("n")
    k = 0.34 / (1.34 + (n + 1.0) / (n - 1.0))
    variance = (
        _sample_variance(n, pl.col("overnight"), pl.col("overnight_sq"))
        + k * _sample_variance(n, pl.col("open_close"), pl.col("open_close_sq"))
        + (1.0 - k) * pl.col("rs") / n
    )
    return _volatility_plan(sums, variance, "vol_yang_zhang", min_obs=2, steps=steps, **options)


def close_to_close_volatility(daily: pl.LazyFrame, *, annualise: bool = False, trading_days: int = 252) -> pl.LazyFrame:
    """Close-to-close volatility: the sample standard deviation of daily log returns.

    Formula: sigma^2 = 1/(n-1) * sum_t (x_t - xbar)^2 with x_t = ln(1 + ret_t),
    over the days of the month with a return (the first day's return runs from
    the previous trading day's close, which may lie in the previous month; the
    return is a property of the day). Units: daily log-return volatility.
    Assumption: i.i.d. returns within the month. Common practice; the
    benchmark of Parkinson (1980) and Garman & Klass (1980).

    Output ``vol_close``; ``n_obs`` counts the returns used (at least 2).
    """
    require_columns(daily, ["security", "month", "date", "ret"], table="daily")
    return run_plan(daily, close_to_close_plan(annualise=annualise, trading_days=trading_days))


def parkinson_volatility(daily: pl.LazyFrame, *, annualise: bool = False, trading_days: int = 252) -> pl.LazyFrame:
    """Parkinson (1980) high-low volatility.

    Formula: sigma^2 = mean_t (h_t - l_t)^2 / (4 ln 2), h and l the log high
    and low of day t. For a driftless Brownian motion observed continuously
    over the trading hours, E[(h - l)^2] = 4 ln 2 * sigma^2 (Parkinson 1980),
    so the estimator is unbiased for the open-to-close variance.
    Source: Parkinson, M. (1980), "The extreme value method for estimating the
    variance of the rate of return", Journal of Business 53(1), 61-65.

    Output ``vol_parkinson`` (daily, trading hours); ``n_obs`` days used.
    """
    require_columns(daily, ["security", "month", "date", "high", "low"], table="daily")
    return run_plan(daily, parkinson_plan(annualise=annualise, trading_days=trading_days))


def garman_klass_volatility(daily: pl.LazyFrame, *, annualise: bool = False, trading_days: int = 252) -> pl.LazyFrame:
    """Garman & Klass (1980) open-high-low-close volatility.

    Formula: sigma^2 = mean_t [ 0.5 (h_t - l_t)^2 - (2 ln 2 - 1)(c_t - o_t)^2 ]
    in log prices (the practical form of their estimator "sigma_5^2", without
    the opening-jump term). Assumptions: driftless Brownian motion observed
    continuously over the trading hours; unbiased for the open-to-close
    variance. Source: Garman, M. B. & Klass, M. J. (1980), "On the estimation
    of security price volatilities from historical data", Journal of Business
    53(1), 67-78.

    Output ``vol_garman_klass`` (daily, trading hours); ``n_obs`` days used.
    """
    require_columns(daily, ["security", "month", "date", "open", "high", "low", "close"], table="daily")
    return run_plan(daily, garman_klass_plan(annualise=annualise, trading_days=trading_days))


def _rogers_satchell_piece() -> pl.Expr:
    h, l, o, c = log_of("high"), log_of("low"), log_of("open"), log_of("close")
    return (h - c) * (h - o) + (l - c) * (l - o)


def rogers_satchell_volatility(daily: pl.LazyFrame, *, annualise: bool = False, trading_days: int = 252) -> pl.LazyFrame:
    """Rogers & Satchell (1991) drift-independent range volatility.

    Formula: sigma^2 = mean_t [ (h_t - c_t)(h_t - o_t) + (l_t - c_t)(l_t - o_t) ]
    in log prices. Unbiased for the open-to-close variance of a Brownian motion
    with any constant drift, observed continuously. Source: Rogers, L. C. G. &
    Satchell, S. E. (1991), "Estimating variance from high, low and closing
    prices", Annals of Applied Probability 1(4), 504-512.

    Output ``vol_rogers_satchell`` (daily, trading hours); ``n_obs`` days used.
    """
    require_columns(daily, ["security", "month", "date", "open", "high", "low", "close"], table="daily")
    return run_plan(daily, rogers_satchell_plan(annualise=annualise, trading_days=trading_days))


def yang_zhang_volatility(daily: pl.LazyFrame, *, annualise: bool = False, trading_days: int = 252) -> pl.LazyFrame:
    """Yang & Zhang (2000) drift-independent volatility including the overnight move.

    Formula, over the n days of the month that have a previous trading day in
    the same month (with the market's calendar, a day after an open day
    without a trade has none; a closed day between them does not count,
    ``liqpanel.measures.neighbours``):

        sigma^2 = sigma_o^2 + k sigma_c^2 + (1 - k) sigma_RS^2,
        k = 0.34 / (1.34 + (n + 1) / (n - 1)),

    sigma_o^2 the sample variance (divisor n - 1) of the overnight move
    o_t - c_{t-1}, sigma_c^2 the sample variance of the open-to-close move
    c_t - o_t, sigma_RS^2 the Rogers-Satchell mean over the same days (log
    prices). Unbiased for the whole-day variance under Brownian motion with
    drift and an opening jump; k minimises the variance among such estimators
    (Yang & Zhang 2000). Source: Yang, D. & Zhang,
    Q. (2000), "Drift-independent volatility estimation based on high, low,
    open, and close prices", Journal of Business 73(3), 477-491.

    Output ``vol_yang_zhang`` (daily, whole day); ``n_obs`` days used (at least 2).
    """
    require_columns(daily, ["security", "month", "date", "open", "high", "low", "close"], table="daily")
    return run_plan(daily, yang_zhang_plan(annualise=annualise, trading_days=trading_days))


__all__ = [
    "PARKINSON_CONSTANT",
    "close_to_close_plan",
    "garman_klass_plan",
    "parkinson_plan",
    "rogers_satchell_plan",
    "yang_zhang_plan",
    "close_to_close_volatility",
    "garman_klass_volatility",
    "parkinson_volatility",
    "rogers_satchell_volatility",
    "yang_zhang_volatility",
]
