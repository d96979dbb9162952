"""Commonality in liquidity (Chordia, Roll & Subrahmanyam 2000).

Does a security's liquidity move with the market's? For each security a
time-series regression of the change in its liquidity measure on the
change in the market's liquidity, the market excluding that security, with
a lead and a lag; then the cross-section of slopes. Formulas (Chordia, Roll
& Subrahmanyam 2000, eq. 1 and Table 3; from memory):

* ``D_i,t = L_i,t / L_i,t-1 - 1`` (proportional change; ``difference``:
  ``L_i,t - L_i,t-1``), for consecutive months with the measure present;
* ``DM_-i,t = (sum_j D_j,t - D_i,t) / (N_t - 1)``: the equal-weighted mean
  change over the other securities with a change in month ``t`` (the
  security's own change left out so the slope is not mechanical);
* ``D_i,t = a_i + b_i,-1 DM_-i,t-1 + b_i,0 DM_-i,t + b_i,+1 DM_-i,t+1
  [+ d_i,-1 R_M,t-1 + d_i,0 R_M,t + d_i,+1 R_M,t+1] + e_i,t`` by OLS over
  the security's months, the bracketed market-return terms as in the paper
  (optional here);
* reported: the cross-sectional mean of ``b_i,0`` (with its
  cross-sectional t-statistic ``mean / (sd / sqrt(N))``), of ``b_i,-1``,
  ``b_i,+1`` and of their sum; the share of ``b_i,0`` that are positive,
  and positive and significant (two-sided 5% with ``n - k`` degrees of
  freedom); the mean adjusted R-squared.

Units: slopes are unitless (change on change); shares are fractions.
"""

from __future__ import annotations

import math

import polars as pl
from scipy import stats

from liqpanel.errors import InputError
from liqpanel.factors.betas import calendar_months
from liqpanel.factors.ols import grouped_ols

CHANGES = ("proportional", "difference")


def liquidity_changes(panel: pl.DataFrame, measure: str, change: str = "proportional") -> pl.DataFrame:
    """``security``, ``month``, ``d``: each security's month-on-month change in ``measure``."""
    if change not in CHANGES:
        raise InputError(f"commonality: change must be one of {list(CHANGES)}, got {change!r}")
    if measure not in panel.columns:
        raise InputError(f"commonality: the panel has no measure '{measure}'", column=measure)
    prev = panel.select("security", pl.col("month").dt.offset_by("1mo"), pl.col(measure).alias("_prev"))
    cur, before = pl.col(measure).cast(pl.Float64), pl.col("_prev").cast(pl.Float64)
    d = cur / before - 1.0 if change == "proportional" else cur - before
    ok = cur.is_finite() & before.is_finite() & ((before != 0) if change == "proportional" else pl.lit(True))
    return (
        panel.select("security", "month", measure)
        .join(prev, on=["security", "month"], how="inner")
        .filter(ok)
        .select("security", "month", d.alias("d"))
        .sort("security", "month")
    )


def commonality_regressions(
    changes: pl.DataFrame, market_return: pl.DataFrame | None = None, *, min_months: int = 12
) -> pl.DataFrame:
    """One regression per security (formula in the module docstring).

    ``changes`` as from :func:`liquidity_changes`; ``market_return``
    (``month``, ``mkt``, dated by the month earned) adds the market-return
    terms. Returns one row per security with ``n_obs``, ``coef_*``,
    ``se_*``, ``tstat_*`` for ``dm_lag``, ``dm``, ``dm_lead`` (and ``mkt_lag``,
    ``mkt``, ``mkt_lead``), ``r2``, ``adj_r2``.
    """
    totals = changes.group_by("month").agg(pl.col("d").sum().alias("_sum"), pl.len().alias("_count"))
    months = calendar_months(changes)
    grid = (
        changes.select("security").unique().join(months, how="cross")
        .join(changes, on=["security", "month"], how="left")
        .join(totals, on="month", how="left")
    )
    # the market's change without the security (all others when it has no change that month)
    own = pl.col("d").fill_null(0.0)
    others = pl.col("_count") - pl.col("d").is_not_null().cast(pl.Int64)
    grid = grid.with_columns(
        pl.when(others > 0).then((pl.col("_sum") - own) / others).alias("dm")
    ).sort("security", "month").with_columns(
        pl.col("dm").shift(1).over("security").alias("dm_lag"),
        pl.col("dm").shift(-1).over("security").alias("dm_lead"),
    )
    xs = ["dm_lag", "dm", "dm_lead"]
    if market_return is not None:
        mkt = market_return.select("month", pl.col("mkt").cast(pl.Float64))
        grid = grid.join(mkt, on="month", how="left").sort("security", "month").with_columns(
            pl.col("mkt").shift(1).over("security").alias("mkt_lag"),
            pl.col("mkt").shift(-1).over("security").alias("mkt_lead"),
        )
        xs += ["mkt_lag", "mkt", "mkt_lead"]
    return grouped_ols(grid, "d", xs, "security", min_obs=min_months)


def commonality_summary(fits: pl.DataFrame, level: float = 0.05) -> dict[str, float]:
    """Cross-sectional summary of :func:`commonality_regressions` (see the module docstring)."""
    ok = fits.filter(pl.col("coef_dm").is_not_null())
    n = ok.height
    if n == 0:
        return {"n_securities": 0}
    k = sum(c.startswith("coef_") for c in fits.columns)
    crit = pl.Series([stats.t.ppf(1 - level / 2, max(int(v) - k, 1)) for v in ok.get_column("n_obs").unique().sort()])
    crit_of = dict(zip(ok.get_column("n_obs").unique().sort().to_list(), crit.to_list()))
    ok = ok.with_columns(pl.col("n_obs").replace_strict(crit_of, return_dtype=pl.Float64).alias("_crit"))
    slope = ok.get_column("coef_dm")
    sd = slope.std()
    row = ok.select(
        pl.col("coef_dm").mean().alias("mean_concurrent"),
        (pl.col("coef_dm") > 0).mean().alias("share_positive"),
        ((pl.col("coef_dm") > 0) & (pl.col("tstat_dm") > pl.col("_crit"))).mean().alias("share_positive_significant"),
        pl.col("coef_dm_lag").mean().alias("mean_lag"),
        pl.col("coef_dm_lead").mean().alias("mean_lead"),
        (pl.col("coef_dm_lag") + pl.col("coef_dm") + pl.col("coef_dm_lead")).mean().alias("mean_sum"),
        pl.col("adj_r2").mean().alias("mean_adj_r2"),
        pl.col("n_obs").mean().alias("mean_months"),
    ).row(0, named=True)
    row["tstat_concurrent"] = row["mean_concurrent"] / (sd / math.sqrt(n)) if n > 1 and sd and sd > 0 else float("nan")
    row["n_securities"] = n
    return row
