"""Step 5 of the study: every estimate against its truth, overall and by bins of the conditions."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import polars as pl

from liqpanel.measures import REGISTRY
from liqpanel.study.defaults import TRADING_HOURS, settings


@dataclass(frozen=True)
class Estimate:
    """One column of estimates and the truth it targets."""

    name: str  # the label in the tables
    kind: str  # "spread" or "volatility"
    value: pl.Expr
    truth: str  # column of the truth table
    lower: pl.Expr | None = None
    upper: pl.Expr | None = None


def estimates_of(selection: dict[str, Any]) -> list[Estimate]:
    """The estimates compared with the truth for a selection of measures.

    A spread measure's first output against ``true_spread``; a volatility
    measure's output against ``true_vol`` (or ``true_vol_session`` for the
    trading-hours estimators); the Gibbs sampler's interval for coverage and
    its sigma_u, and the Roll-implied sigma_u = sqrt(gamma0 + 2 gamma1)
    (missing when negative), against ``true_vol``.
    """
    out = []
    for name in selection:
        m = REGISTRY[name]
        first = m.outputs[0]
        if m.family == "spread":
            lo, hi = f"{first}_lo", f"{first}_hi"
            has_interval = lo in m.outputs and hi in m.outputs
            out.append(Estimate(first, "spread", pl.col(first), "true_spread",
                                pl.col(lo) if has_interval else None, pl.col(hi) if has_interval else None))
        elif m.family == "volatility":
            out.append(Estimate(first, "volatility", pl.col(first), "true_vol_session" if name in TRADING_HOURS else "true_vol"))
    if "gibbs_spread" in selection:
        out.append(Estimate("gibbs_sigma_u", "volatility", pl.col("gibbs_sigma_u"), "true_vol"))
    if "roll_spread" in selection:
        var = pl.col("roll_efficient_var")
        out.append(Estimate("roll_sigma_u", "volatility", pl.when(var >= 0).then(var.sqrt()), "true_vol"))
    return out


def _bin_edges(values: np.ndarray, count: int, edges: list[float] | None) -> np.ndarray:
    """Inner edges: the given ones, or the quantiles that split ``values`` into ``count`` bins."""
    if edges is not None:
        return np.asarray(edges, dtype=float)
    values = values[np.isfinite(values)]
    if count <= 1 or values.size == 0:
        return np.array([])
    edges = np.unique(np.quantile(values, np.arange(1, count) / count))
    return edges[edges > values.min()]  # an edge at the minimum would leave its lower bin empty


def _label(edges: np.ndarray) -> list[str]:
    """Bin labels with the fewest significant digits (at least 2) that keep the edges apart."""
    digits = next((d for d in range(2, 7) if len({f"{x:.{d}g}" for x in edges}) == len(edges)), 7)

    def fmt(x: float) -> str:
        return f"{x:.{digits}g}" if abs(x) < 10 ** digits else f"{x:.0f}"

    bounds = [None, *edges.tolist(), None]
    return [
        f"below {fmt(hi)}" if lo is None and hi is not None
        else f"{fmt(lo)} and above" if hi is None and lo is not None
        else "all" if lo is None
        else f"{fmt(lo)} to {fmt(hi)}"
        for lo, hi in zip(bounds[:-1], bounds[1:])
    ]


def add_bins(truth: pl.DataFrame, study: dict[str, Any] | None = None) -> pl.DataFrame:
    """Add the bins of the true spread / volatility ratio and of the true trades per day.

    Bins are quantiles of the draws (``bins`` of them) unless
    ``spread_vol_edges`` / ``intensity_edges`` give the inner edges; a value
    on an edge goes to the upper bin ("a to b" is the interval [a, b)). Adds
    ``spread_vol``, ``spread_vol_bin`` (0, 1, ...), ``spread_vol_range``
    (label), ``intensity_bin`` and ``intensity_range``.
    """
    s = settings(study)
    ratio = (truth.get_column("true_spread") / truth.get_column("true_vol")).to_numpy()
    lam = truth.get_column("true_trades_per_day").to_numpy()
    out = truth.with_columns(pl.Series("spread_vol", ratio))
    for prefix, values, edges in (
        ("spread_vol", ratio, _bin_edges(ratio, s["bins"], s["spread_vol_edges"])),
        ("intensity", lam, _bin_edges(lam, s["bins"], s["intensity_edges"])),
    ):
        index = np.searchsorted(edges, values, side="right").astype(np.int64)
        labels = _label(edges)
        out = out.with_columns(
            pl.Series(f"{prefix}_bin", index),
            pl.Series(f"{prefix}_range", [labels[i] for i in index], dtype=pl.String),
        )
    return out


def long_estimates(monthly: pl.DataFrame, truth: pl.DataFrame, estimates: list[Estimate]) -> pl.DataFrame:
    """One row per draw and estimator: estimate, truth, interval, error and the draw's bins."""
    joined = truth.join(monthly, on="security", how="left")
    keep = ["security", "draw", "spread_vol", "spread_vol_bin", "spread_vol_range", "intensity_bin", "intensity_range"]
    frames = [
        joined.select(
            *keep,
            pl.lit(e.name).alias("estimator"),
            pl.lit(e.kind).alias("kind"),
            e.value.cast(pl.Float64).alias("estimate"),
            pl.col(e.truth).alias("truth"),
            (e.lower if e.lower is not None else pl.lit(None)).cast(pl.Float64).alias("lower"),
            (e.upper if e.upper is not None else pl.lit(None)).cast(pl.Float64).alias("upper"),
        )
        for e in estimates
    ]
    order = {e.name: i for i, e in enumerate(estimates)}
    return (
        pl.concat(frames)
        .with_columns(
            pl.when(pl.col("estimate").is_nan()).then(None).otherwise(pl.col("estimate")).alias("estimate"),
            pl.col("estimator").replace_strict(order, return_dtype=pl.Int64).alias("_order"),
        )
        .with_columns((pl.col("estimate") - pl.col("truth")).alias("error"))
        .sort("_order", "draw")
        .drop("_order")
    )


def _statistics() -> list[pl.Expr]:
    has = pl.col("estimate").is_not_null()
    truth = pl.col("truth").filter(has)
    err = pl.col("error").drop_nulls()
    interval = pl.col("lower").is_not_null() & pl.col("upper").is_not_null() & has
    inside = ((pl.col("truth") >= pl.col("lower")) & (pl.col("truth") <= pl.col("upper"))).filter(interval)
    return [
        pl.len().cast(pl.Int64).alias("n"),
        has.sum().cast(pl.Int64).alias("n_estimates"),
        (1.0 - has.sum() / pl.len()).alias("missing_share"),
        truth.mean().alias("mean_truth"),
        pl.col("estimate").mean().alias("mean_estimate"),
        err.mean().alias("mean_bias"),
        err.median().alias("median_bias"),
        (err.mean() / truth.mean()).alias("relative_bias"),
        (err.pow(2).mean()).sqrt().alias("rmse"),
        pl.when(has.sum() > 2).then(pl.corr(pl.col("estimate").filter(has), truth)).alias("correlation"),
        pl.when(interval.sum() > 0).then(inside.cast(pl.Float64).mean()).alias("coverage"),
    ]


def summarise(long: pl.DataFrame, by: list[str] | None = None) -> pl.DataFrame:
    """The statistics of every estimator, overall or by the columns in ``by``.

    ``mean_bias`` and ``median_bias`` of estimate - truth over the
    security-months with an estimate; ``relative_bias`` = mean bias / mean
    truth of those months; ``rmse``; ``correlation`` (Pearson) of estimate and
    truth across them; ``missing_share`` of all drawn months; ``coverage``,
    where the estimator has an interval, the share of its intervals that
    contain the truth. Units: those of the estimator (proportions).
    """
    by = by or []
    order = long.select("estimator").unique(maintain_order=True).with_row_index("_order")
    return (
        long.group_by("estimator", "kind", *by)
        .agg(_statistics())
        .join(order, on="estimator", how="left")
        .sort("_order", *by)
        .drop("_order")
    )


def ranking(overall: pl.DataFrame, kind: str) -> pl.DataFrame:
    """The estimators of one kind ranked by RMSE (lowest first; none estimated last)."""
    return (
        overall.filter(pl.col("kind") == kind)
        .sort(pl.col("rmse").is_null(), "rmse", "estimator")
        .with_row_index("rank", offset=1)
        .select(pl.col("rank").cast(pl.Int64), "estimator", "rmse", "mean_bias", "relative_bias", "correlation",
                "missing_share", "n_estimates")
    )
