"""Zero returns, turnover and the Pastor-Stambaugh return-reversal gamma."""

from __future__ import annotations

import polars as pl

from liqpanel.contracts import require_columns
from liqpanel.errors import ConfigError
from liqpanel.measures.neighbours import in_security_date_order, next_in_month

KEY = ["security", "month"]
CALENDARS = ("market", "security")


def _zero_return_counts(daily: pl.LazyFrame, calendar: str) -> pl.LazyFrame:
    """Per security-month: days counted, zero-return days, zero-return days with volume."""
    if calendar not in CALENDARS:
        raise ConfigError(f"measure 'zero_return_share': option `calendar` must be one of {CALENDARS}, got {calendar!r}")
    require_columns(daily, ["security", "month", "date", "ret", "volume"], table="daily")
    daily = in_security_date_order(daily)  # the result must not depend on the row order
    ret = pl.col("ret")
    counts = daily.group_by(KEY, maintain_order=True).agg(
        pl.len().cast(pl.Int64).alias("_rows"),
        ret.is_null().sum().cast(pl.Int64).alias("_no_ret"),
        (ret == 0).sum().cast(pl.Int64).alias("_zero"),
        ((ret == 0) & (pl.col("volume") > 0)).sum().cast(pl.Int64).alias("_zero_traded"),
    )
    if calendar == "security":
        return counts.with_columns(pl.lit(0, dtype=pl.Int64).alias("_no_trade"))
    days = daily.select("date", "month").unique().sort("date").with_row_index("_day")
    month_span = days.group_by("month").agg(pl.col("_day").min().alias("_m_first"), pl.col("_day").max().alias("_m_last"))
    listed = (
        daily.group_by("security")
        .agg(pl.col("date").min().alias("_first_date"), pl.col("date").max().alias("_last_date"))
        .join(days.select(pl.col("date").alias("_first_date"), pl.col("_day").alias("_s_first")), on="_first_date", how="left")
        .join(days.select(pl.col("date").alias("_last_date"), pl.col("_day").alias("_s_last")), on="_last_date", how="left")
        .select("security", "_s_first", "_s_last")
    )
    market_days = (
        pl.min_horizontal(pl.col("_s_last"), pl.col("_m_last")).cast(pl.Int64)
        - pl.max_horizontal(pl.col("_s_first"), pl.col("_m_first")).cast(pl.Int64)
        + 1
    )
    return (
        counts.join(month_span, on="month", how="left")
        .join(listed, on="security", how="left")
        .with_columns((market_days - pl.col("_rows")).clip(lower_bound=0).alias("_no_trade"))
    )


def _zero_share(daily: pl.LazyFrame, calendar: str, numerator: pl.Expr, output: str) -> pl.LazyFrame:
    n_obs = pl.col("_rows") + pl.col("_no_trade") - pl.col("_no_ret")
    return (
        _zero_return_counts(daily, calendar)
        .with_columns(n_obs.alias("n_obs"))
        .with_columns(
            pl.when(pl.col("n_obs") > 0).then(numerator.cast(pl.Float64) / pl.col("n_obs")).otherwise(None).alias(output),
            pl.when(pl.col("n_obs") > 0).then(None).otherwise(pl.lit("no_returns")).cast(pl.String).alias("reason"),
        )
        .select(*KEY, output, "n_obs", "reason")
        .sort(KEY)
    )


def zero_return_share(daily: pl.LazyFrame, *, calendar: str = "market") -> pl.LazyFrame:
    """Share of the month's trading days with a zero return (Lesmond, Ogden & Trzcinka 1999).

    Formula: zero_return_share = (days with ret = 0 + days without a trade) / days,
    where the days are the month's market trading days within the security's
    listed span and a day without a trade has an unchanged price, i.e. a zero
    return. Convention of this project: with ``calendar="market"`` (default)
    the market's trading days are the dates on which any security of the input
    has a row, and the listed span runs from the security's first to its last
    date in the input; with ``calendar="security"`` only the security's own
    rows count. Days whose return is missing (a security's first day) are left
    out of both counts.

    Assumption: a marginal investor trades only when the information value
    exceeds the trading cost, so zero-return days signal high costs. Units:
    share of days, 0 to 1. Source: Lesmond, D. A., Ogden, J. P. & Trzcinka,
    C. A. (1999), "A new estimate of transaction costs", Review of Financial
    Studies 12(5), 1113-1141.

    Output ``zero_return_share``; ``n_obs`` days counted; ``reason``
    "no_returns" when none.
    """
    return _zero_share(daily, calendar, pl.col("_zero") + pl.col("_no_trade"), "zero_return_share")


def zero_return_share_traded(daily: pl.LazyFrame, *, calendar: str = "market") -> pl.LazyFrame:
    """Share of the month's trading days with a zero return and positive volume.

    The variant of Lesmond, Ogden & Trzcinka (1999) that counts only days on
    which the security traded: numerator = days with ret = 0 and volume > 0;
    the denominator is the same as for ``zero_return_share`` (so the two
    differ by the share of days without trading). Units: share of days, 0 to
    1. Source: Lesmond, Ogden & Trzcinka (1999), Review of Financial Studies
    12(5), 1113-1141; the positive-volume variant is common practice.

    Output ``zero_return_share_traded``; ``n_obs`` days counted.
    """
    return _zero_share(daily, calendar, pl.col("_zero_traded"), "zero_return_share_traded")


def turnover(daily: pl.LazyFrame) -> pl.LazyFrame:
    """Monthly share turnover: the month's volume divided by shares outstanding.

    Formula: turnover = sum_t volume_t / shares_out, with shares_out the last
    positive value of the month (shares outstanding at the month's end).
    Volume and shares outstanding must be in the same unit (shares). Units:
    fraction of the shares outstanding traded in the month (0.05 = 5%).
    Common practice (e.g. Datar, Naik & Radcliffe 1998, "Liquidity and stock
    returns: an alternative test", Journal of Financial Markets 1(2)).

    Output ``turnover``; ``n_obs`` days with a volume; ``reason``
    "no_shares_out" when no day of the month has a positive shares_out.
    """
    require_columns(daily, ["security", "month", "date", "volume", "shares_out"], table="daily")
    daily = in_security_date_order(daily)  # the result must not depend on the row order
    shares = pl.when(pl.col("shares_out") > 0).then(pl.col("shares_out"))
    return (
        daily.group_by(KEY, maintain_order=True)
        .agg(
            pl.col("volume").sum().alias("_volume"),
            shares.sort_by("date").drop_nulls().last().alias("_shares"),
            pl.col("volume").count().cast(pl.Int64).alias("n_obs"),
        )
        .with_columns(
            (pl.col("_volume") / pl.col("_shares")).alias("turnover"),
            pl.when(pl.col("_shares").is_null()).then(pl.lit("no_shares_out")).otherwise(None).cast(pl.String).alias("reason"),
        )
        .select(*KEY, "turnover", "n_obs", "reason")
        .sort(KEY)
    )


def pastor_stambaugh_gamma(daily: pl.LazyFrame, *, dollar_volume_unit: float = 1e6) -> pl.LazyFrame:
    """Pastor & Stambaugh (2003) return-reversal gamma, per security-month.

    OLS within the month of

        r^e_{t+1} = theta + phi r_t + gamma sign(r^e_t) v_t + e_{t+1},

    r_t the security's return, r^e_t = r_t - r_m,t its return in excess of the
    market return ``mkt_ret``, v_t the dollar volume in millions (divided by
    ``dollar_volume_unit``, default 10^6). Day t+1 is the security's next
    trading day within the same month (convention of this project). gamma is
    solved for all security-months at once from group-wise centred cross
    products (the normal equations with the intercept partialled out):

        gamma = (S11 S2y - S12 S1y) / (S11 S22 - S12^2),

    S_ab = sum (a - abar)(b - bbar), x1 = r_t, x2 = sign(r^e_t) v_t,
    y = r^e_{t+1}. Pastor & Stambaugh require at least 15 observations (the
    registered minimum). Assumption: order flow moves prices temporarily, so
    a larger negative gamma means more illiquidity. Units: return per million
    of currency traded.

    Source: Pastor, L. & Stambaugh, R. F. (2003), "Liquidity risk and expected
    stock returns", Journal of Political Economy 111(3), 642-685.

    Output ``ps_gamma``; ``n_obs`` day pairs used; ``reason``
    "collinear_regressors" when the regressors have (almost) no independent
    variation: fewer than three pairs, a constant regressor, or a squared
    correlation between them above 1 - 1e-8.
    """
    require_columns(daily, ["security", "month", "date", "ret", "mkt_ret", "dollar_volume"], table="daily")
    daily = in_security_date_order(daily)  # the result must not depend on the row order
    if not dollar_volume_unit > 0:
        raise ConfigError(f"measure 'ps_gamma': option `dollar_volume_unit` must be positive, got {dollar_volume_unit}")
    excess = pl.col("ret") - pl.col("mkt_ret")
    x1 = pl.col("ret")
    x2 = excess.sign() * pl.col("dollar_volume") / dollar_volume_unit
    y = next_in_month(excess)
    valid = pl.all_horizontal([x1.is_not_null(), x2.is_not_null(), y.is_not_null()])
    frame = daily.with_columns(
        pl.when(valid).then(x1).alias("_x1"),
        pl.when(valid).then(x2).alias("_x2"),
        pl.when(valid).then(y).alias("_y"),
    )
    # Centred within the month (the intercept partialled out); the month's means
    # are window columns, so the group-by needs only sums.
    frame = frame.with_columns((pl.col(c) - pl.col(c).mean().over(KEY)).alias(f"{c}_c") for c in ("_x1", "_x2", "_y"))
    a, b, yy = pl.col("_x1_c"), pl.col("_x2_c"), pl.col("_y_c")
    monthly = frame.group_by(KEY, maintain_order=True).agg(
        (a * a).sum().alias("_s11"),
        (a * b).sum().alias("_s12"),
        (b * b).sum().alias("_s22"),
        (a * yy).sum().alias("_s1y"),
        (b * yy).sum().alias("_s2y"),
        pl.col("_x1").count().cast(pl.Int64).alias("n_obs"),
    )
    s11, s12, s22 = pl.col("_s11"), pl.col("_s12"), pl.col("_s22")
    det = s11 * s22 - s12 * s12
    # Collinear regressors: fewer than three pairs, a regressor without
    # variation, or a squared correlation of r_t and sign(r^e_t) v_t above
    # 1 - 1e-8 (det <= 1e-8 S11 S22; convention of this project), where the
    # solution would be noise amplified by rounding.
    singular = (pl.col("n_obs") < 3) | (s11 <= 0) | (s22 <= 0) | (det <= 1e-8 * s11 * s22)
    gamma = (s11 * pl.col("_s2y") - s12 * pl.col("_s1y")) / det
    return (
        monthly.with_columns(
            pl.when(singular).then(None).otherwise(gamma).cast(pl.Float64).alias("ps_gamma"),
            pl.when(singular).then(pl.lit("collinear_regressors")).otherwise(None).cast(pl.String).alias("reason"),
        )
        .select(*KEY, "ps_gamma", "n_obs", "reason")
        .sort(KEY)
    )


__all__ = [
    "CALENDARS",
    "pastor_stambaugh_gamma",
    "turnover",
    "zero_return_share",
    "zero_return_share_traded",
]
