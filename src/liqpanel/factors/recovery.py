"""How well each liquidity measure recovers a planted market-wide liquidity shock.

Only for simulated markets whose truth table carries ``liquidity_shock``
(the planted innovation, positive = more liquid; see
:mod:`liqpanel.simulate`). For each measure the market-wide change is the
cross-sectional mean of ``log L_i,t - log L_i,t-1`` over securities with a
positive value in both months, with its sign flipped so that, like the
shock, a positive value means more liquid (the measures are costs: a larger
value is less liquid). Reported: the time-series correlation of that series
with the planted shock (Pearson, common practice), and the months used.
Series built from the factors stage (``liq_innovation``, ``-illiq_innovation``)
are compared in the same way.
"""

from __future__ import annotations

import polars as pl

from liqpanel.core.stable import ordered_mean


def market_log_change(panel: pl.DataFrame, measure: str) -> pl.DataFrame:
    """``month``, ``value``: minus the mean log change of ``measure`` over securities present in both months."""
    prev = panel.select("security", pl.col("month").dt.offset_by("1mo"), pl.col(measure).alias("_prev"))
    ok = (pl.col(measure) > 0) & (pl.col("_prev") > 0) & pl.col(measure).is_finite() & pl.col("_prev").is_finite()
    return (
        panel.select("security", "month", measure)
        .join(prev, on=["security", "month"], how="inner")
        .filter(ok)
        .group_by("month")
        .agg((-ordered_mean(pl.col(measure).log() - pl.col("_prev").log())).alias("value"))
        .sort("month")
    )


def shock_recovery(
    panel: pl.DataFrame, truth: pl.DataFrame, measures: list[str], series: dict[str, pl.DataFrame] | None = None
) -> pl.DataFrame:
    """One row per measure (and per extra series): ``series``, ``n``, ``correlation``.

    ``series``: more candidate series (``month``, ``value``), compared as they are.
    """
    shock = truth.group_by("month").agg(pl.col("liquidity_shock").first()).sort("month")
    candidates = {m: market_log_change(panel, m) for m in measures if m in panel.columns}
    candidates.update(series or {})
    rows = []
    for name, frame in candidates.items():
        joined = frame.join(shock, on="month", how="inner").drop_nulls().sort("month")
        corr = joined.select(pl.corr("value", "liquidity_shock")).item() if joined.height > 2 else None
        rows.append({"comparison": "monthly series vs planted shock", "series": name, "n": joined.height,
                     "correlation": corr})
    return pl.DataFrame(rows, schema=SCHEMA)


SCHEMA = {"comparison": pl.String, "series": pl.String, "n": pl.Int64, "correlation": pl.Float64}


def beta_recovery(betas: pl.DataFrame, truth: pl.DataFrame) -> pl.DataFrame:
    """Cross-sectional correlation of each security's latest estimated liquidity beta with the planted one."""
    planted = truth.group_by("security").agg(pl.col("liquidity_beta").first())
    latest = betas.sort("month").group_by("security").agg(pl.col("liq_beta").last())
    joined = latest.join(planted, on="security", how="inner").drop_nulls().sort("security")
    corr = joined.select(pl.corr("liq_beta", "liquidity_beta")).item() if joined.height > 2 else None
    return pl.DataFrame([{"comparison": "latest beta vs planted beta, across securities", "series": "liq_beta",
                          "n": joined.height, "correlation": corr}], schema=SCHEMA)
