"""A traded liquidity factor and its performance statistics.

The factor is illiquid-minus-liquid within size groups, built from a
dependent double sort (size first, then the liquidity measure within each
size group), in the manner of the size-controlled long-short factors of
Fama & French (1993) and the liquidity factors that followed Amihud (2002)
and Pastor & Stambaugh (2003).

Dating: like ``ret_next``, a row keyed ``month = t`` holds the factor return
earned over month ``t + 1`` by portfolios formed at the end of month ``t``.
"""

from __future__ import annotations

import math

import numpy as np
import polars as pl

from liqpanel.core.errors import InputError
from liqpanel.models.newey_west import automatic_lags, newey_west_mean
from liqpanel.models.sorts import double_sort

FACTORS_DATED = ("return_month", "formation_month")


def liquidity_factor(
    panel: pl.DataFrame,
    measure: str,
    size: str = "log_size",
    n_size: int = 2,
    n_liq: int = 3,
    weight: str | None = None,
    breakpoint_universe: str | None = None,
    min_securities: int = 5,
    ret: str = "ret_next",
    high_is_illiquid: bool = True,
    breakpoints: str = "pooled",
) -> pl.DataFrame:
    """Illiquid-minus-liquid factor returns, one row per month: ``month``, ``factor_ret``.

    Formula: each month ``t`` sort on ``size`` into ``n_size`` groups, then,
    within each size group, on ``measure`` into ``n_liq`` groups (breakpoints
    and assignment as in :func:`liqpanel.models.sorts.sort_portfolios`);
    ``factor_ret_t = (1/n_size) sum_g [R_(g, most illiquid),t+1 - R_(g, most liquid),t+1]``
    with equal weights or ``weight`` (market value at the end of ``t``) inside
    each portfolio. ``high_is_illiquid``: True for measures where a larger
    value means less liquid (spreads, Amihud illiquidity); False (e.g.
    turnover) flips the sign so the factor stays illiquid-minus-liquid.
    Units: decimal return per month; ``month`` is the formation month ``t``
    and the return is earned in ``t + 1`` (the dating of ``ret_next``). Months
    where a size group lacks breakpoints or a corner portfolio has fewer than
    ``min_securities`` members are left out (no row). Method: the
    size-controlled long-short construction of Fama & French (1993) applied to
    a liquidity measure. ``breakpoints="per_market"``: size and liquidity
    breakpoints within each market (``liqpanel.models.sorts``).
    """
    result = double_sort(
        panel,
        first=size,
        second=measure,
        n1=n_size,
        n2=n_liq,
        dependent=True,
        weight=weight,
        breakpoint_universe=breakpoint_universe,
        min_securities=min_securities,
        ret=ret,
        breakpoints=breakpoints,
    )
    sign = 1.0 if high_is_illiquid else -1.0
    return result.hml_returns.select("month", (sign * pl.col("ret")).alias("factor_ret")).sort("month")


def factor_summary(
    factor: pl.DataFrame,
    factors: pl.DataFrame | None = None,
    lags: int | None = 6,
    factors_dated: str = "return_month",
) -> dict:
    """Mean, Newey-West t, Sharpe ratio and alphas of a factor return series.

    ``factor``: columns ``month`` and ``factor_ret`` (as from
    :func:`liquidity_factor`). Statistics:

    * ``mean`` (decimal per month), ``std_error`` and ``tstat``: Newey & West
      (1987), Bartlett kernel with ``lags`` (``None``: Newey & West 1994 rule),
      small-sample factor ``T/(T-1)``;
    * ``sharpe_annual = mean / sd * sqrt(12)`` with the sample standard
      deviation (``ddof = 1``) of the monthly returns (Sharpe 1966; the
      factor is long-short, so no risk-free rate is subtracted);
    * with ``factors`` (a frame with ``month`` and one column per
      user-supplied factor return): the time-series regression
      ``factor_ret_t = alpha + sum_j b_j f_j,t + e_t`` (Jensen 1968) by OLS
      through ``linearmodels`` (``IV2SLS`` without instruments) with the
      Newey-West kernel covariance (Bartlett, same bandwidth, factor
      ``T/(T-k)``): ``alpha``, ``alpha_std_error``, ``alpha_tstat``,
      ``alpha_pvalue`` (t with T - k degrees of freedom), ``betas``,
      ``beta_tstats``, ``r2``,
      ``n_months_alpha``.

    ``factors_dated``: ``return_month`` (default) when the supplied factor
    returns are dated by the month in which they are earned (the usual way
    factor returns are published): the factor row of formation month ``t`` is then
    matched with the supplied row of month ``t + 1``; ``formation_month``
    when they already follow the ``ret_next`` dating. Months with a missing
    value on either side are left out of the regression.
    """
    from linearmodels.iv import IV2SLS

    for column in ("month", "factor_ret"):
        if column not in factor.columns:
            raise InputError(f"the factor table needs a column '{column}', it has {factor.columns}", column=column)
    if factors_dated not in FACTORS_DATED:
        raise ValueError(f"factors_dated must be one of {list(FACTORS_DATED)}, got {factors_dated!r}")
    series = factor.sort("month").filter(pl.col("factor_ret").is_not_null() & pl.col("factor_ret").is_finite())
    values = series.get_column("factor_ret").to_numpy()
    nw = newey_west_mean(values, lags=lags)
    sd = float(np.std(values, ddof=1)) if values.size > 1 else float("nan")
    out: dict = {
        "mean": nw["mean"],
        "std_error": nw["std_error"],
        "tstat": nw["tstat"],
        "sharpe_annual": nw["mean"] / sd * math.sqrt(12) if sd > 0 else float("nan"),
        "n_months": nw["n"],
        "lags": nw["lags"],
    }
    if factors is None:
        return out

    if "month" not in factors.columns:
        raise InputError(f"the supplied factors table needs a column 'month', it has {factors.columns}",
                         column="month")
    names = [c for c in factors.columns if c != "month"]
    if not names:
        raise InputError("the supplied factors table has no factor columns besides 'month'")
    for c in names:
        if not factors.schema[c].is_numeric():
            raise InputError(f"supplied factor column '{c}' must be numeric, found {factors.schema[c]}", column=c)
    if "factor_ret" in names:
        raise InputError("a supplied factor is called 'factor_ret'; rename it", column="factor_ret")
    if factors.get_column("month").is_duplicated().any():
        raise InputError("the supplied factors table has duplicate months", column="month")
    key = series.with_columns(
        (pl.col("month").dt.offset_by("1mo") if factors_dated == "return_month" else pl.col("month")).alias("_join")
    )
    joined = (
        key.join(factors.rename({"month": "_join"}).with_columns(pl.col(names).cast(pl.Float64)), on="_join",
                 how="inner")
        .filter(pl.all_horizontal([pl.col(c).is_not_null() & pl.col(c).is_finite() for c in names]))
        .sort("month")
    )
    k = len(names) + 1
    if joined.height <= k:
        raise InputError(
            f"only {joined.height} months match between the factor and the supplied factors "
            f"(factors_dated='{factors_dated}'); at least {k + 1} are needed"
        )
    n = joined.height
    lag = automatic_lags(n) if lags is None else int(min(lags, n - 1))
    y = joined.get_column("factor_ret").to_numpy()
    x = np.column_stack([np.ones(n), joined.select(names).to_numpy()])
    res = IV2SLS(y, x, None, None).fit(cov_type="kernel", kernel="bartlett", bandwidth=float(lag), debiased=True)
    params = np.asarray(res.params)
    se = np.asarray(res.std_errors)
    tstats = np.asarray(res.tstats)
    pvalues = np.asarray(res.pvalues)
    out.update(
        {
            "alpha": float(params[0]),
            "alpha_std_error": float(se[0]),
            "alpha_tstat": float(tstats[0]),
            "alpha_pvalue": float(pvalues[0]),
            "betas": {c: float(params[i + 1]) for i, c in enumerate(names)},
            "beta_tstats": {c: float(tstats[i + 1]) for i, c in enumerate(names)},
            "r2": float(res.rsquared),
            "n_months_alpha": n,
            "lags_alpha": lag,
        }
    )
    return out


def summary_table(summary: dict) -> pl.DataFrame:
    """The statistics of :func:`factor_summary` as a two-column table: ``statistic``, ``value``."""
    rows = [
        ("mean (per month)", summary["mean"]), ("t-statistic (Newey-West)", summary["tstat"]),
        ("Sharpe ratio (annualised)", summary["sharpe_annual"]), ("months", float(summary["n_months"])),
    ]
    if "alpha" in summary:
        rows += [("alpha (per month)", summary["alpha"]), ("alpha t-statistic", summary["alpha_tstat"])]
        rows += [(f"beta {k}", v) for k, v in summary["betas"].items()]
        rows += [("R-squared", summary["r2"])]
    return pl.DataFrame({"statistic": [r[0] for r in rows], "value": [float(r[1]) for r in rows]})
