"""Zero returns, turnover and the Pastor-Stambaugh return-reversal gamma."""

from __future__ import annotations

import polars as pl

from liqpanel.core.contracts import require_columns
from liqpanel.core.errors import ConfigError
from liqpanel.measures.neighbours import next_in_month
from liqpanel.measures.plan import Plan, missing_reason, month_shifted, run_plan

CALENDARS = ("market", "security")


def _zero_share_plan(calendar: str, output: str, traded: bool) -> Plan:
    if calendar not in CALENDARS:
        raise ConfigError(f"measure '{output}': option `calendar` must be one of {CALENDARS}, got {calendar!r}")
    ret = pl.col("ret")
    no_trade = (
        (pl.col("market_days") - pl.col("n_days")).clip(lower_bound=0) if calendar == "market" else pl.lit(0, dtype=pl.Int64)
    )
    n_obs = pl.col("n_days") + no_trade - pl.col("no_ret").cast(pl.Int64)
    numerator = pl.col("zero_traded") if traded else pl.col("zero") + no_trade
    return Plan(
        sums={"no_ret": ret.is_null(), "zero": ret == 0, "zero_traded": (ret == 0) & (pl.col("volume") > 0)},
        monthly=(
            pl.when(n_obs > 0).then(numerator.cast(pl.Float64) / n_obs).otherwise(None).alias(output),
            n_obs.alias("n_obs"),
            missing_reason(n_obs <= 0, "no_returns"),
        ),
        context=("market_days",) if calendar == "market" else (),
    )


def zero_return_share_plan(*, calendar: str = "market") -> Plan:
    """The plan of ``zero_return_share``."""
    return _zero_share_plan(calendar, "zero_return_share", traded=False)


def zero_return_share_traded_plan(*, calendar: str = "market") -> Plan:
    """The plan of ``zero_return_share_traded``."""
    return _zero_share_plan(calendar, "zero_return_share_traded", traded=True)


def zero_return_share(daily: pl.LazyFrame, *, calendar: str = "market") -> pl.LazyFrame:
    """Share of the month's trading days with a zero return (Lesmond, Ogden & Trzcinka 1999).

    Formula: zero_return_share = (days with ret = 0 + days without a trade) / days,
    where the days are the month's market trading days within the security's
    listed span and a day without a trade has an unchanged price, i.e. a zero
    return. Convention of this project: with ``calendar="market"`` (default)
    the market's trading days are the open days of its trading calendar when
    the profile has one (``calendar`` or ``holidays``; a closed day is not a
    day, an open day without a row is a day without a trade), else the dates
    on which any security of the input has a row (the fallback), and the
    listed span runs from the security's first to its last
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
    require_columns(daily, ["security", "month", "date", "ret", "volume"], table="daily")
    return run_plan(daily, zero_return_share_plan(calendar=calendar))


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
    require_columns(daily, ["security", "month", "date", "ret", "volume"], table="daily")
    return run_plan(daily, zero_return_share_traded_plan(calendar=calendar))


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
    return run_plan(daily, turnover_plan())


def turnover_plan() -> Plan:
    """The plan of ``turnover``."""
    shares = pl.col("shares")
    return Plan(
        sums={"volume": pl.col("volume"), "n": pl.col("volume").is_not_null()},
        lasts={"shares": pl.when(pl.col("shares_out") > 0).then(pl.col("shares_out"))},
        monthly=(
            (pl.col("volume") / shares).alias("turnover"),
            pl.col("n").cast(pl.Int64).alias("n_obs"),
            missing_reason(shares.is_null(), "no_shares_out"),
        ),
    )


def pastor_stambaugh_gamma(daily: pl.LazyFrame, *, dollar_volume_unit: float = 1e6) -> pl.LazyFrame:
    """Pastor & Stambaugh (2003) return-reversal gamma, per security-month.

    OLS within the month of

        r^e_{t+1} = theta + phi r_t + gamma sign(r^e_t) v_t + e_{t+1},

    r_t the security's return, r^e_t = r_t - r_m,t its return in excess of the
    market return ``mkt_ret``, v_t the dollar volume in millions (divided by
    ``dollar_volume_unit``, default 10^6). Day t+1 is the security's next
    trading day within the same month (convention of this project); with the
    market's calendar an open day without a trade between t and t+1 drops
    the observation, a closed day does not (``liqpanel.measures.neighbours``). gamma is
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
    return run_plan(daily, pastor_stambaugh_plan(dollar_volume_unit=dollar_volume_unit))


def pastor_stambaugh_plan(*, dollar_volume_unit: float = 1e6) -> Plan:
    """The plan of ``pastor_stambaugh_gamma``: centred cross products from monthly sums."""
    if not dollar_volume_unit > 0:
        raise ConfigError(f"measure 'ps_gamma': option `dollar_volume_unit` must be positive, got {dollar_volume_unit}")
    excess = pl.col("ret") - pl.col("mkt_ret")
    x1 = pl.col("ret")
    x2 = excess.sign() * pl.col("dollar_volume") / dollar_volume_unit
    y = next_in_month(excess)
    valid = pl.col("_ps_valid")
    # Shifted by their first value in the month: the centred products below are
    # differences of sums, exact for a constant regressor.
    a, b, yy = pl.col("_ps_a"), pl.col("_ps_b"), pl.col("_ps_y")
    steps = (
        {"_ps_x2": x2, "_ps_next": y},
        {"_ps_valid": pl.all_horizontal([x1.is_not_null(), pl.col("_ps_x2").is_not_null(), pl.col("_ps_next").is_not_null()])},
        {name: month_shifted(pl.when(valid).then(v)) for name, v in
         (("_ps_a", x1), ("_ps_b", pl.col("_ps_x2")), ("_ps_y", pl.col("_ps_next")))},
    )
    sums = {"n": valid, "a": a, "b": b, "y": yy, "aa": a * a, "ab": a * b, "bb": b * b, "ay": a * yy, "by": b * yy}
    n = pl.col("n")

    def centred(first: str, second: str) -> pl.Expr:
        return pl.col(first + second) - pl.col(first) * pl.col(second) / n

    s11, s12, s22 = centred("a", "a"), centred("a", "b"), centred("b", "b")
    det = s11 * s22 - s12 * s12
    # Collinear regressors: fewer than three pairs, a regressor without
    # variation, or a squared correlation of r_t and sign(r^e_t) v_t above
    # 1 - 1e-8 (det <= 1e-8 S11 S22; convention of this project), where the
    # solution would be noise amplified by rounding.
    singular = (n < 3) | (s11 <= 0) | (s22 <= 0) | (det <= 1e-8 * s11 * s22)
    gamma = (s11 * centred("b", "y") - s12 * centred("a", "y")) / det
    return Plan(
        steps=steps,
        sums=sums,
        monthly=(
            pl.when(singular).then(None).otherwise(gamma).cast(pl.Float64).alias("ps_gamma"),
            n.cast(pl.Int64).alias("n_obs"),
            missing_reason(singular, "collinear_regressors"),
        ),
    )


__all__ = [
    "CALENDARS",
    "pastor_stambaugh_gamma",
    "pastor_stambaugh_plan",
    "turnover",
    "turnover_plan",
    "zero_return_share",
    "zero_return_share_plan",
    "zero_return_share_traded",
    "zero_return_share_traded_plan",
]
