"""Historical liquidity betas and the traded liquidity factor (Pastor & Stambaugh 2003).

Each security's liquidity beta is the slope on the innovation ``L_t`` in a
rolling time-series regression of its excess return on the market factor
(and any other factors the user supplies) and ``L_t``; securities are
sorted into portfolios on that beta and the traded factor is the return of
the highest-beta portfolio minus the lowest (Pastor & Stambaugh 2003,
section 4: 60 months of data, at least 36, deciles, value-weighted, formed
at each year end; from memory).

Dating follows the panel: a row keyed ``month = t`` holds the beta
estimated with returns through month ``t`` and the portfolio return earned
in ``t + 1`` (``ret_next``).
"""

from __future__ import annotations

import polars as pl

from liqpanel.core.errors import InputError
from liqpanel.factors.ols import grouped_ols, rolling_ols
from liqpanel.core.stable import ordered_sum

LIQ = "liq_innovation"


def monthly_returns(panel: pl.DataFrame, ret: str = "ret_next") -> pl.DataFrame:
    """Each security's return dated by the month it is earned: ``security``, ``month``, ``ret``.

    The panel's ``ret_next`` at month ``t`` is the return of ``t + 1``.
    """
    return panel.select(
        "security", pl.col("month").dt.offset_by("1mo").alias("month"), pl.col(ret).cast(pl.Float64).alias("ret")
    ).filter(pl.col("ret").is_not_null())


def value_weighted_market(panel: pl.DataFrame, size: str = "market_cap", ret: str = "ret_next") -> pl.DataFrame:
    """The panel's own value-weighted market return, dated by the month earned: ``month``, ``mkt``.

    ``mkt_t+1 = sum_i w_i,t r_i,t+1 / sum_i w_i,t`` with ``w`` the market value
    at the end of ``t`` (common practice); used when no market factor is supplied.
    """
    ok = pl.col(ret).is_finite() & pl.col(size).is_finite() & (pl.col(size) > 0)
    return (
        panel.filter(ok)
        .group_by("month")
        .agg((ordered_sum(pl.col(ret) * pl.col(size)) / ordered_sum(pl.col(size))).alias("mkt"))
        .select(pl.col("month").dt.offset_by("1mo"), "mkt")
        .sort("month")
    )


def calendar_months(frame: pl.DataFrame) -> pl.DataFrame:
    """Every calendar month from the first to the last of ``frame``'s ``month`` column."""
    first, last = frame.get_column("month").min(), frame.get_column("month").max()
    return pl.DataFrame({"month": pl.date_range(first, last, "1mo", eager=True)})


def liquidity_betas(
    returns: pl.DataFrame,
    regressors: pl.DataFrame,
    *,
    window: int = 60,
    min_months: int = 36,
    risk_free: str | None = None,
) -> pl.DataFrame:
    """Rolling liquidity betas: ``security``, ``month``, ``liq_beta``, ``liq_beta_se``, ``n_months``.

    Formula: for each security ``i`` and month ``t``, OLS over months
    ``t - window + 1 .. t`` of
    ``r_i,s - rf_s = b0 + sum_j b_j f_j,s + beta_L L_s + e_i,s``
    (Pastor & Stambaugh 2003, eq. 8 with their factors; from memory), where
    ``regressors`` holds ``month``, the factor columns and ``liq_innovation``
    (``L``), and ``risk_free`` names a column of ``regressors`` (omitted: the
    returns are used as they are). Months with a missing return drop out of
    the window; a beta needs ``min_months`` of them. Units: ``liq_beta`` is
    return per unit of ``L``. All securities' windows are fitted together
    from rolling sums of cross products (:func:`liqpanel.factors.ols.rolling_ols`).
    """
    if LIQ not in regressors.columns:
        raise InputError(f"the regressors need a column '{LIQ}'", column=LIQ)
    if min_months > window:
        raise InputError(f"min_months ({min_months}) is larger than the window ({window})")
    factors = [c for c in regressors.columns if c not in ("month", LIQ, risk_free)]
    months = calendar_months(regressors)
    grid = (
        returns.select("security").unique().join(months, how="cross")
        .join(returns.select("security", "month", "ret"), on=["security", "month"], how="left")
        .join(regressors, on="month", how="left")
    )
    excess = pl.col("ret") - (pl.col(risk_free) if risk_free else pl.lit(0.0))
    grid = grid.with_columns(excess.alias("_excess"))
    fits = rolling_ols(grid, "_excess", [*factors, LIQ], entity="security", time="month", window=window,
                       min_obs=min_months)
    return fits.select(
        "security", "month",
        pl.col(f"coef_{LIQ}").alias("liq_beta"), pl.col(f"se_{LIQ}").alias("liq_beta_se"),
        pl.col("n_obs").alias("n_months"),
    ).filter(pl.col("liq_beta").is_not_null()).sort("security", "month")


def formation_betas(betas: pl.DataFrame, rebalance: str = "annual") -> pl.DataFrame:
    """The beta a portfolio is formed on in each month: ``security``, ``month``, ``liq_beta``.

    ``monthly``: the beta estimated through that month. ``annual``: the beta
    of the latest December, held for the twelve months that follow
    (Pastor & Stambaugh 2003 form portfolios at each year end; from memory).
    """
    if rebalance == "monthly":
        return betas.select("security", "month", "liq_beta")
    if rebalance != "annual":
        raise InputError(f"rebalance must be 'annual' or 'monthly', got {rebalance!r}")
    december = betas.filter(pl.col("month").dt.month() == 12).select(
        "security", pl.col("month").alias("formed"), "liq_beta"
    )
    held = december.with_columns(pl.int_ranges(0, 12).alias("_k")).explode("_k").select(
        "security", pl.col("formed").dt.offset_by(pl.format("{}mo", pl.col("_k"))).alias("month"), "liq_beta"
    )
    return held.sort("security", "month")


def post_ranking_betas(portfolio_returns: pl.DataFrame, regressors: pl.DataFrame,
                       risk_free: str | None = None) -> pl.DataFrame:
    """Each portfolio's full-sample loadings on the factors and ``L`` from its post-formation returns.

    ``portfolio_returns``: ``month`` (formation month, the ``ret_next``
    dating), ``portfolio``, ``ret``. Each return is matched with the
    regressors of the month it is earned (``month + 1``); OLS per portfolio
    of the (excess) return on an intercept, the factors and ``L``. Returns
    ``portfolio``, ``n_obs``, ``coef_*``, ``se_*``, ``tstat_*``, ``r2``.
    """
    factors = [c for c in regressors.columns if c not in ("month", LIQ, risk_free)]
    joined = portfolio_returns.with_columns(pl.col("month").dt.offset_by("1mo").alias("_earned")).join(
        regressors.rename({"month": "_earned"}), on="_earned", how="inner"
    )
    excess = pl.col("ret") - (pl.col(risk_free) if risk_free else pl.lit(0.0))
    return grouped_ols(joined.with_columns(excess.alias("_excess")), "_excess", [*factors, LIQ], "portfolio",
                       min_obs=len(factors) + 3, order="_earned")
