"""The spread implied by the share of zero returns and the return volatility (Fong, Holden & Trzcinka 2017)."""

from __future__ import annotations

import polars as pl

from liqpanel.core.errors import ConfigError
from liqpanel.measures.impact import CALENDARS
from liqpanel.measures.plan import Plan, run_plan


def no_trade_days(calendar: str, measure: str) -> pl.Expr:
    """Days of the month without a row (no trade): the market's trading days in the listed span minus the rows.

    With ``calendar="security"`` a security's own rows are its days and the
    count is zero (see ``liqpanel.measures.impact.zero_return_share``).
    """
    if calendar not in CALENDARS:
        raise ConfigError(f"measure '{measure}': option `calendar` must be one of {CALENDARS}, got {calendar!r}")
    if calendar == "security":
        return pl.lit(0, dtype=pl.Int64)
    return (pl.col("market_days") - pl.col("n_days")).clip(lower_bound=0)


def normal_quantile(p: pl.Expr) -> pl.Expr:
    """Phi^{-1}(p) of the standard normal distribution (scipy's ``ndtri``) over a whole monthly column."""
    return p.map_batches(
        lambda s: pl.Series(s.name, _ndtri(s.cast(pl.Float64).to_numpy()), nan_to_null=True), return_dtype=pl.Float64
    )


def fht_plan(*, calendar: str = "market") -> Plan:
    """The plan of ``fht_spread``."""
    ret = pl.col("ret")
    missing_days = no_trade_days(calendar, "fht_spread")
    n = pl.col("n") + missing_days  # a day without a trade has an unchanged price: a zero return
    zeros = pl.col("zero") + missing_days
    mean = pl.col("sum") / n
    variance = (pl.col("sum_sq") - n * mean * mean) / (n - 1)  # sample variance, zero-return days included
    sigma = variance.clip(lower_bound=0.0).sqrt()
    z = zeros.cast(pl.Float64) / n
    all_zero = zeros >= n
    too_few = n < 2
    return Plan(
        sums={"n": ret.is_not_null(), "zero": ret == 0, "sum": ret, "sum_sq": ret * ret},
        monthly=(
            pl.when(too_few | all_zero).then(None)
            .otherwise(2.0 * sigma * normal_quantile((1.0 + z) / 2.0)).alias("fht_spread"),
            pl.when(too_few).then(None).otherwise(z).alias("fht_zero_share"),
            n.cast(pl.Int64).alias("n_obs"),
            pl.when(too_few).then(pl.lit("too_few_returns"))
            .when(all_zero).then(pl.lit("all_returns_zero"))
            .otherwise(None).cast(pl.String).alias("reason"),
        ),
        context=("market_days",) if calendar == "market" else (),
    )


def fht_spread(daily: pl.LazyFrame, *, calendar: str = "market") -> pl.LazyFrame:
    """Fong, Holden & Trzcinka (2017) spread from zero returns and volatility ("FHT").

    Formula: S = 2 sigma Phi^{-1}((1 + z) / 2), where z is the month's share
    of days with a zero return, sigma the sample standard deviation of the
    month's daily simple returns (zero-return days included) and Phi^{-1}
    the standard normal quantile. Derivation (the LOT model of Lesmond,
    Ogden & Trzcinka 1999 simplified by Fong, Holden & Trzcinka): the true
    return is N(0, sigma^2) and the observed return is zero when it lies
    within +-S/2, so z = P(|r*| < S/2) = 2 Phi(S / (2 sigma)) - 1.

    Days: as in ``zero_return_share`` (``calendar="market"``: the market's
    trading days within the security's listed span, a day without a trade
    counting as a zero return; ``"security"``: the security's own rows).
    Units: proportional full spread (0.01 = 1%). Assumptions: returns are
    normal with mean zero, zero returns come only from trading costs,
    sigma of the observed returns stands for the true one (it is a little
    smaller, by under 2% when S < sigma).

    Outputs ``fht_spread``, ``fht_zero_share`` (z); ``n_obs`` days counted;
    ``reason`` "too_few_returns" (below two) or "all_returns_zero" (z = 1,
    where sigma is zero and the formula has no value).

    Source: Fong, K. Y. L., Holden, C. W. & Trzcinka, C. A. (2017), "What
    are the best liquidity proxies for global research?", Review of Finance
    21(4), 1355-1401 (formula from memory).
    """
    return run_plan(daily, fht_plan(calendar=calendar))


__all__ = ["fht_plan", "fht_spread", "no_trade_days", "normal_quantile"]


def _ndtri(p):
    """scipy's inverse normal distribution function, imported only when a month is evaluated
    (a clean or bars job reads the registry without loading scipy)."""
    from scipy.special import ndtri

    return ndtri(p)
