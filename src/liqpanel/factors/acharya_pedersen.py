"""Liquidity-adjusted CAPM betas (Acharya & Pedersen 2005).

Formulas as recalled from Acharya & Pedersen (2005, section 4; from memory):

* normalised illiquidity ``c_i,t = min(0.25 + 0.30 ILLIQ_i,t P_t-1, 30)``, a
  cost in percent of the price, where ``ILLIQ`` is Amihud's (2002) measure
  (absolute return per million of dollar volume, the ``amihud`` column) and
  ``P_t-1`` the market's capitalisation at the end of ``t - 1`` over that at
  the end of the first month (the paper's July 1962);
* market (and portfolio) illiquidity: the value-weighted mean of ``c`` (weights:
  market value at the end of ``t - 1``);
* innovations from AR(2) regressions that keep ``P_t-1`` fixed in every term:
  ``0.25 + 0.30 I_t P_t-1 = a0 + a1 (0.25 + 0.30 I_t-1 P_t-1)
  + a2 (0.25 + 0.30 I_t-2 P_t-1) + u_t`` with ``I`` the value-weighted mean of
  ``ILLIQ`` truncated where ``c`` is capped, ``u`` the innovation; the
  market return's innovation from an AR(2) of the return on a constant;
* with ``rM``, ``cM`` the market's and ``r_p``, ``c_p`` a portfolio's
  innovations and ``D = var(rM - cM)``: ``beta1 = cov(r_p, rM)/D``,
  ``beta2 = cov(c_p, cM)/D``, ``beta3 = cov(r_p, cM)/D``,
  ``beta4 = cov(c_p, rM)/D``, ``beta_net = beta1 + beta2 - beta3 - beta4``.

Units: ``c`` in percent of the price in tables; the betas are computed with
``c`` in decimals (``c / 100``) so that return and cost share a unit and the
betas are unitless. Assumptions: monthly data; the AR regressions are fitted
once over the sample (the paper's in-sample innovations).
"""

from __future__ import annotations

import polars as pl

from liqpanel.core.errors import InputError
from liqpanel.factors.ols import grouped_ols
from liqpanel.core.stable import ordered_mean, ordered_sum

INTERCEPT, SLOPE, CAP = 0.25, 0.30, 30.0  # Acharya & Pedersen (2005), percent (from memory)


def normalised_illiquidity(panel: pl.DataFrame, illiq: str = "amihud", size: str = "market_cap") -> pl.DataFrame:
    """``security``, ``month``, ``illiq_norm`` (c, percent), ``illiq_trunc``, ``market_ratio`` (P_t-1), ``weight``.

    ``market_ratio`` of month ``t``: the panel's total ``size`` at the end of
    ``t - 1`` over that at the end of the panel's first month (months with no
    predecessor get none). ``illiq_trunc``: ``ILLIQ`` cut at the value where
    ``c`` reaches the cap, ``(30 - 0.25) / (0.30 P_t-1)``. ``weight``: the
    security's ``size`` at the end of ``t - 1``.
    """
    for column in ("security", "month", illiq, size):
        if column not in panel.columns:
            raise InputError(f"Acharya-Pedersen betas need a panel column '{column}'", column=column)
    totals = panel.group_by("month").agg(
        ordered_sum(pl.when(pl.col(size) > 0).then(pl.col(size).cast(pl.Float64))).alias("_total")
    ).sort("month")
    ratio = totals.select(
        pl.col("month").dt.offset_by("1mo"), (pl.col("_total") / pl.col("_total").first()).alias("market_ratio")
    )
    weights = panel.select("security", pl.col("month").dt.offset_by("1mo"), pl.col(size).cast(pl.Float64).alias("weight"))
    p = pl.col("market_ratio")
    raw = pl.col(illiq).cast(pl.Float64)
    return (
        panel.select("security", "month", illiq)
        .join(ratio, on="month", how="inner")
        .join(weights, on=["security", "month"], how="left")
        .filter(raw.is_finite() & (raw >= 0))
        .with_columns(pl.min_horizontal(INTERCEPT + SLOPE * raw * p, pl.lit(CAP)).alias("illiq_norm"),
                      pl.min_horizontal(raw, (CAP - INTERCEPT) / (SLOPE * p)).alias("illiq_trunc"))
        .select("security", "month", "illiq_norm", "illiq_trunc", "market_ratio", "weight")
        .sort("security", "month")
    )


def illiquidity_innovations(series: pl.DataFrame, by: str | None = None) -> pl.DataFrame:
    """AR(2) innovations of normalised illiquidity, per group of ``by`` (or one series).

    ``series``: ``month``, ``illiq_trunc`` (the value-weighted truncated
    ILLIQ), ``market_ratio`` and, with ``by``, the group column. Adds
    ``c_innovation`` (percent; formula in the module docstring) where the
    month and the two calendar months before it are present.
    """
    keys = [by] if by else []
    lag = series.select(*keys, "month", "illiq_trunc")
    design = series.join(
        lag.with_columns(pl.col("month").dt.offset_by("1mo")).rename({"illiq_trunc": "_lag1"}), on=[*keys, "month"],
        how="left",
    ).join(
        lag.with_columns(pl.col("month").dt.offset_by("2mo")).rename({"illiq_trunc": "_lag2"}), on=[*keys, "month"],
        how="left",
    ).with_columns(
        [(INTERCEPT + SLOPE * pl.col(c) * pl.col("market_ratio")).alias(n)
         for c, n in (("illiq_trunc", "_y"), ("_lag1", "_x1"), ("_lag2", "_x2"))]
    )
    return _ar_residuals(design, "_y", ["_x1", "_x2"], keys, "c_innovation").drop("_lag1", "_lag2", "_y", "_x1", "_x2")


def return_innovations(series: pl.DataFrame, ret: str = "ret", by: str | None = None) -> pl.DataFrame:
    """AR(2) innovations of a return series: adds ``r_innovation`` (decimal) per group of ``by``."""
    keys = [by] if by else []
    lag = series.select(*keys, "month", ret)
    design = series.join(
        lag.with_columns(pl.col("month").dt.offset_by("1mo")).rename({ret: "_r1"}), on=[*keys, "month"], how="left"
    ).join(
        lag.with_columns(pl.col("month").dt.offset_by("2mo")).rename({ret: "_r2"}), on=[*keys, "month"], how="left"
    )
    return _ar_residuals(design, ret, ["_r1", "_r2"], keys, "r_innovation").drop("_r1", "_r2")


def _ar_residuals(design: pl.DataFrame, y: str, xs: list[str], keys: list[str], name: str) -> pl.DataFrame:
    group = keys or ["_all"]
    frame = design if keys else design.with_columns(pl.lit(1).alias("_all"))
    fits = grouped_ols(frame, y, xs, group, min_obs=len(xs) + 3, order="month")
    coef = fits.select(*group, *[pl.col(f"coef_{c}") for c in ("intercept", *xs)])
    fitted = pl.col("coef_intercept")
    for x in xs:  # a missing lag leaves the fitted value (and the innovation) missing
        fitted = fitted + pl.col(f"coef_{x}") * pl.col(x)
    out = frame.join(coef, on=group, how="left").with_columns((pl.col(y) - fitted).alias(name))
    return out.drop(*[f"coef_{c}" for c in ("intercept", *xs)], *([] if keys else ["_all"])).sort(*keys, "month")


def ap_betas(portfolio: pl.DataFrame, market: pl.DataFrame) -> pl.DataFrame:
    """The four betas and the net beta per portfolio.

    ``portfolio``: ``portfolio``, ``month``, ``ret`` (the return, decimal),
    ``c_innovation`` (percent); ``market``: ``month``, ``r_innovation``
    (decimal), ``c_innovation`` (percent). Months where every innovation is
    present enter; covariances with ``ddof = 1``.
    """
    m = market.select("month", pl.col("r_innovation").alias("_rm"), (pl.col("c_innovation") / 100).alias("_cm"))
    joined = portfolio.select("portfolio", "month", "ret", (pl.col("c_innovation") / 100).alias("_cp")).join(
        m, on="month", how="inner"
    ).drop_nulls()
    joined = joined.with_columns((pl.col("_rm") - pl.col("_cm")).alias("_net"))
    denom = _cov("_net", "_net")
    return (
        joined.group_by("portfolio")
        .agg(
            (_cov("ret", "_rm") / denom).alias("beta1"),
            (_cov("_cp", "_cm") / denom).alias("beta2"),
            (_cov("ret", "_cm") / denom).alias("beta3"),
            (_cov("_cp", "_rm") / denom).alias("beta4"),
            pl.len().cast(pl.Int64).alias("n_months_beta"),
        )
        .with_columns((pl.col("beta1") + pl.col("beta2") - pl.col("beta3") - pl.col("beta4")).alias("beta_net"))
        .sort("portfolio")
    )


def _cov(a: str, b: str) -> pl.Expr:
    """Sample covariance (ddof 1) added in month order (:mod:`liqpanel.core.stable`)."""
    da = pl.col(a) - ordered_mean(pl.col(a), "month")
    db = pl.col(b) - ordered_mean(pl.col(b), "month")
    return ordered_sum(da * db, "month") / (pl.len() - 1)


def rank_groups(frame: pl.DataFrame, on: str, n: int) -> pl.Expr:
    """Portfolio 1..n per month by rank of ``on`` (ties by order of rank 'ordinal'): floor((rank - 1) n / count) + 1."""
    count = pl.col(on).count().over("month")
    rank = pl.col(on).rank("ordinal").over("month")
    return (((rank - 1) * n) // count + 1).cast(pl.Int64)


MODELS = (("capm_beta", ("exp_illiq", "beta1")), ("net_beta", ("exp_illiq", "beta_net")))


def cross_section_tests(cs: pl.DataFrame, lags: int | None) -> tuple[pl.DataFrame, int | None]:
    """Fama & MacBeth (1973) regressions of ``ret_next`` on ``exp_illiq`` and a beta, per :data:`MODELS`.

    ``cs``: one row per portfolio (``security``) and formation month with
    ``ret_next``, ``exp_illiq`` (decimal) and the betas. Through
    :func:`liqpanel.models.regressions.fit_model` (linearmodels), Newey & West
    (1987) standard errors with ``lags``. Returns the long table (model,
    variable, coef, std_error, tstat, n_portfolio_months, n_months, r2) and the lags used.
    """
    from liqpanel.models.model_spec import ModelSpec
    from liqpanel.models.regressions import fit_model

    results = [fit_model(cs, ModelSpec(name=name, regressors=x, estimator="fama_macbeth", covariance="newey_west",
                                       lags=lags)) for name, x in MODELS]
    long = pl.DataFrame([
        {"model": r.name, "variable": v, "coef": r.params[v], "std_error": r.std_errors[v], "tstat": r.tstats[v],
         "n_portfolio_months": r.nobs, "n_months": r.n_months, "r2": r.r2}
        for r in results for v in r.params
    ], schema_overrides={"n_portfolio_months": pl.Int64, "n_months": pl.Int64})
    return long, results[0].lags
