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

from liqpanel.core.errors import InputError
from liqpanel.factors.ols import grouped_ols
from liqpanel.core.stable import ordered_sum

CHANGES = ("proportional", "difference")


TIMES = ("month", "date")


def _period(time: str, dates: pl.Expr | None = None) -> pl.Expr:
    """A consecutive integer per period: calendar months for ``month``; for ``date``, trading days
    numbered in order over the days present in the table (so the day before Monday is Friday)."""
    if time == "month":
        return pl.col("month").dt.year().cast(pl.Int64) * 12 + pl.col("month").dt.month().cast(pl.Int64)
    return pl.col("date").rank("dense").cast(pl.Int64)


def liquidity_changes(
    panel: pl.DataFrame, measure: str, change: str = "proportional", time: str = "month"
) -> pl.DataFrame:
    """``security``, ``<time>``, ``_t`` (period number), ``d``: each security's change in ``measure``
    from the period before (the calendar month, or the previous trading day of the table)."""
    if change not in CHANGES:
        raise InputError(f"commonality: change must be one of {list(CHANGES)}, got {change!r}")
    if time not in TIMES:
        raise InputError(f"commonality: time must be one of {list(TIMES)}, got {time!r}")
    if measure not in panel.columns:
        raise InputError(f"commonality: the {'panel' if time == 'month' else 'daily table'} has no measure "
                         f"'{measure}'", column=measure)
    frame = panel.select("security", time, measure).with_columns(_period(time).alias("_t"))
    prev = frame.select("security", (pl.col("_t") + 1).alias("_t"), pl.col(measure).alias("_prev"))
    cur, before = pl.col(measure).cast(pl.Float64), pl.col("_prev").cast(pl.Float64)
    d = cur / before - 1.0 if change == "proportional" else cur - before
    ok = cur.is_finite() & before.is_finite() & ((before != 0) if change == "proportional" else pl.lit(True))
    return (
        frame.join(prev, on=["security", "_t"], how="inner")
        .filter(ok)
        .select("security", time, "_t", d.alias("d"))
        .sort("security", "_t")
    )


def commonality_regressions(
    changes: pl.DataFrame, market_return: pl.DataFrame | None = None, *, min_months: int = 12, time: str = "month"
) -> pl.DataFrame:
    """One regression per security (formula in the module docstring).

    ``changes`` as from :func:`liquidity_changes` (same ``time``);
    ``market_return`` (``<time>``, ``mkt``, dated by the period earned) adds
    the market-return terms. ``min_months``: periods a security's regression
    needs. Returns one row per security with ``n_obs``, ``coef_*``,
    ``se_*``, ``tstat_*`` for ``dm_lag``, ``dm``, ``dm_lead`` (and
    ``mkt_lag``, ``mkt``, ``mkt_lead``), ``r2``, ``adj_r2``.
    """
    # one numbering of the periods for the changes and the market return
    times = [changes.select(time)] + ([market_return.select(time)] if market_return is not None else [])
    calendar = pl.concat(times).unique().with_columns(_period(time).alias("_t"))
    changes = changes.drop("_t", strict=False).join(calendar, on=time, how="left")
    totals = changes.group_by("_t").agg(ordered_sum(pl.col("d")).alias("_sum"), pl.len().alias("_count"))
    periods = pl.DataFrame({"_t": pl.int_range(changes["_t"].min(), changes["_t"].max() + 1, eager=True)})
    grid = (
        changes.select("security").unique().join(periods, how="cross")
        .join(changes.drop(time), on=["security", "_t"], how="left")
        .join(totals, on="_t", how="left")
    )
    # the market's change without the security (all others when it has no change that period)
    own = pl.col("d").fill_null(0.0)
    others = pl.col("_count") - pl.col("d").is_not_null().cast(pl.Int64)
    grid = grid.with_columns(
        pl.when(others > 0).then((pl.col("_sum") - own) / others).alias("dm")
    ).sort("security", "_t").with_columns(
        pl.col("dm").shift(1).over("security").alias("dm_lag"),
        pl.col("dm").shift(-1).over("security").alias("dm_lead"),
    )
    xs = ["dm_lag", "dm", "dm_lead"]
    if market_return is not None:
        mkt = market_return.select(time, pl.col("mkt").cast(pl.Float64)).join(calendar, on=time, how="inner")
        grid = grid.join(mkt.drop(time), on="_t", how="left").sort("security", "_t").with_columns(
            pl.col("mkt").shift(1).over("security").alias("mkt_lag"),
            pl.col("mkt").shift(-1).over("security").alias("mkt_lead"),
        )
        xs += ["mkt_lag", "mkt", "mkt_lead"]
    return grouped_ols(grid, "d", xs, "security", min_obs=min_months, order="_t")


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
        pl.col("n_obs").mean().alias("mean_months"),  # periods: months or trading days
    ).row(0, named=True)
    row["tstat_concurrent"] = row["mean_concurrent"] / (sd / math.sqrt(n)) if n > 1 and sd and sd > 0 else float("nan")
    row["n_securities"] = n
    return row
