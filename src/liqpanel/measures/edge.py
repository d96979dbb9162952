"""The efficient open-high-low-close spread estimator of Ardia, Guidotti & Kroencke (2024)."""

from __future__ import annotations

import polars as pl

from liqpanel.contracts import require_columns
from liqpanel.measures.neighbours import in_security_date_order, previous_in_month

KEY = ["security", "month"]


def edge_spread(daily: pl.LazyFrame, *, signed: bool = False) -> pl.LazyFrame:
    """Ardia, Guidotti & Kroencke (2024) efficient estimator of the spread ("EDGE").

    Uses each day t of the month together with the security's previous
    trading day t-1 in the same month (convention of this project: the month's
    first day has no previous day and is not used, so months are
    self-contained). Log prices o, h, l, c; eta = (h + l)/2:

        r1 = eta_t - o_t,  r2 = o_t - eta_{t-1},  r3 = eta_t - c_{t-1},
        r4 = c_{t-1} - eta_{t-1},  r5 = o_t - c_{t-1}
        tau_t = 1 if H_t != L_t or L_t != C_{t-1}, else 0
        po = mean(tau 1[O_t != H_t]) + mean(tau 1[O_t != L_t])
        pc = mean(tau 1[C_{t-1} != H_{t-1}]) + mean(tau 1[C_{t-1} != L_{t-1}])
        pt = mean(tau)
        d_k = r_k - tau mean(r_k) / pt,  k = 1, 3, 5
        x1 = -(4/po) d1 r2 - (4/pc) d3 r4
        x2 = -(4/po) d1 r5 - (4/pc) d5 r4
        S^2 = (v2 e1 + v1 e2) / (v1 + v2)     (e_j = mean(x_j), v_j = var(x_j))

    with S^2 = (e1 + e2)/2 when v1 + v2 = 0. The estimate is sqrt(|S^2|), or
    sign(S^2) sqrt(|S^2|) with ``signed=True``. Means run over the days of the
    month with all inputs present; v_j divides by the number of days (the
    ratio v1/v2 does not depend on the divisor). Indicators compare the raw
    prices. The value is missing when sum(tau) < 2 ("too_few_moving_days") or
    po = 0 or pc = 0 ("no_range").

    Assumptions: the efficient log price is a Brownian motion (any drift) and
    trades occur at the bid or the ask with equal probability; the estimator
    is close to unbiased at moderate and low trading intensity. When the
    spread is small relative to volatility many months have S^2 < 0 and the
    unsigned value is biased up. With no volatility at all (a degenerate case
    outside the model) open, high and low tie so often that the probability
    corrections fail and the estimate is biased up (about 1.4x in this
    project's tests). Units: proportional full spread (0.01 = 1%).

    Source: Ardia, D., Guidotti, E. & Kroencke, T. A. (2024), "Efficient
    estimation of bid-ask spreads from open, high, low, and close prices",
    Journal of Financial Economics 161, 103916.

    Output ``edge_spread``; ``n_obs`` days with a previous day in the month.
    """
    require_columns(daily, ["security", "month", "date", "open", "high", "low", "close"], table="daily")
    daily = in_security_date_order(daily)  # the result must not depend on the row order
    O, H, L, C = pl.col("open"), pl.col("high"), pl.col("low"), pl.col("close")
    H1, L1, C1 = previous_in_month(H), previous_in_month(L), previous_in_month(C)
    o, h, l = O.log(), H.log(), L.log()
    c1 = C1.log()
    eta = (h + l) / 2.0
    eta1 = (H1.log() + L1.log()) / 2.0
    valid = pl.all_horizontal([x.is_not_null() for x in (O, H, L, C1, H1, L1)])

    def masked(expr: pl.Expr) -> pl.Expr:
        return pl.when(valid).then(expr).otherwise(None)

    tau = ((H != L) | (L != C1)).cast(pl.Float64)
    frame = daily.with_columns(
        masked(eta - o).alias("_r1"),
        masked(o - eta1).alias("_r2"),
        masked(eta - c1).alias("_r3"),
        masked(c1 - eta1).alias("_r4"),
        masked(o - c1).alias("_r5"),
        masked(tau).alias("_tau"),
        masked(tau * (O != H).cast(pl.Float64)).alias("_po1"),
        masked(tau * (O != L).cast(pl.Float64)).alias("_po2"),
        masked(tau * (C1 != H1).cast(pl.Float64)).alias("_pc1"),
        masked(tau * (C1 != L1).cast(pl.Float64)).alias("_pc2"),
    )
    # The month's means as window columns, so that the aggregation below needs
    # only plain means, variances and sums (the fast path of the group-by).
    tau_col = pl.col("_tau")
    frame = frame.with_columns(
        tau_col.mean().over(KEY).alias("_pt"),
        (pl.col("_po1").mean() + pl.col("_po2").mean()).over(KEY).alias("_po"),
        (pl.col("_pc1").mean() + pl.col("_pc2").mean()).over(KEY).alias("_pc"),
        *[pl.col(r).mean().over(KEY).alias(f"{r}_mean") for r in ("_r1", "_r3", "_r5")],
    )
    po, pc = pl.col("_po"), pl.col("_pc")
    d1, d3, d5 = (pl.col(r) - tau_col * pl.col(f"{r}_mean") / pl.col("_pt") for r in ("_r1", "_r3", "_r5"))
    r2, r4, r5 = pl.col("_r2"), pl.col("_r4"), pl.col("_r5")
    frame = frame.with_columns(
        (-4.0 / po * d1 * r2 - 4.0 / pc * d3 * r4).alias("_x1"),
        (-4.0 / po * d1 * r5 - 4.0 / pc * d5 * r4).alias("_x2"),
    )
    x1, x2 = pl.col("_x1"), pl.col("_x2")
    monthly = frame.group_by(KEY, maintain_order=True).agg(
        x1.mean().alias("_e1"),
        x2.mean().alias("_e2"),
        x1.var(ddof=0).alias("_v1"),
        x2.var(ddof=0).alias("_v2"),
        tau_col.sum().alias("_n_tau"),
        po.first().alias("_po"),
        pc.first().alias("_pc"),
        tau_col.count().cast(pl.Int64).alias("n_obs"),
    )
    e1, e2, v1, v2 = pl.col("_e1"), pl.col("_e2"), pl.col("_v1"), pl.col("_v2")
    s2 = pl.when(v1 + v2 > 0).then((v2 * e1 + v1 * e2) / (v1 + v2)).otherwise((e1 + e2) / 2.0)
    spread = s2.abs().sqrt()
    if signed:
        spread = spread * s2.sign()
    reason = (
        pl.when(pl.col("n_obs") == 0).then(pl.lit("no_consecutive_days"))
        .when(pl.col("_n_tau") < 2).then(pl.lit("too_few_moving_days"))
        .when((pl.col("_po") == 0) | (pl.col("_pc") == 0)).then(pl.lit("no_range"))
        .otherwise(None)
        .cast(pl.String)
    )
    return (
        monthly.with_columns(reason.alias("reason"))
        .with_columns(pl.when(pl.col("reason").is_null()).then(spread).otherwise(None).cast(pl.Float64).alias("edge_spread"))
        .select(*KEY, "edge_spread", "n_obs", "reason")
        .sort(KEY)
    )


__all__ = ["edge_spread"]
