"""The efficient open-high-low-close spread estimator of Ardia, Guidotti & Kroencke (2024)."""

from __future__ import annotations

import polars as pl

from liqpanel.core.contracts import require_columns
from liqpanel.measures.highlow import check_flat_days
from liqpanel.measures.neighbours import previous_in_month
from liqpanel.measures.plan import Plan, log_of, run_plan


def edge_spread(daily: pl.LazyFrame, *, signed: bool = False, flat_days: str = "use") -> pl.LazyFrame:
    """Ardia, Guidotti & Kroencke (2024) efficient estimator of the spread ("EDGE").

    Uses each day t of the month together with the security's previous
    trading day t-1 in the same month (convention of this project: the month's
    first day has no previous day and is not used, so months are
    self-contained). With the market's trading calendar an open day without
    a trade between t-1 and t breaks the pair (day t is not used), a closed
    day between them does not; without one any gap is spanned (the
    fallback; ``liqpanel.measures.neighbours``). ``flat_days``: "use"
    (default, the paper's estimator, whose tau already discounts days
    without price moves) or "drop" day t when day t or t-1 has high = low.
    Log prices o, h, l, c; eta = (h + l)/2:

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
    return run_plan(daily, edge_plan(signed=signed, flat_days=flat_days))


def edge_plan(*, signed: bool = False, flat_days: str = "use") -> Plan:
    """The plan of ``edge_spread``: the estimator written in monthly sums.

    The month's constants A = -4/po, B = -4/pc and k_j = mean(r_j)/pt are
    formed from the first sums and put on every day of the month
    (``per_month``), so x1 = A d1 r2 + B d3 r4 and x2 = A d1 r5 + B d5 r4
    with d_j = r_j - tau k_j are per-day columns, and their means and
    variances come from four sums: of x1, x2, x1^2 and x2^2.
    """
    O, H, L = pl.col("open"), pl.col("high"), pl.col("low")
    H1, L1, C1 = pl.col("_edge_high_prev"), pl.col("_edge_low_prev"), pl.col("_edge_close_prev")
    o, c1 = log_of("open"), pl.col("_edge_log_close_prev")
    eta, eta1 = pl.col("_edge_eta"), pl.col("_edge_eta_prev")
    valid = pl.col("_edge_valid")

    def masked(expr: pl.Expr) -> pl.Expr:
        return pl.when(valid).then(expr).otherwise(None)

    present = pl.all_horizontal([x.is_not_null() for x in (O, H, L, C1, H1, L1)])
    if check_flat_days(flat_days, "edge_spread"):
        present = present & ~((H == L) | (H1 == L1)).fill_null(False)
    names = ("r1", "r2", "r3", "r4", "r5", "tau")
    steps = (
        {
            "_edge_high_prev": previous_in_month(H),
            "_edge_low_prev": previous_in_month(L),
            "_edge_close_prev": previous_in_month(pl.col("close")),
            "_edge_log_close_prev": previous_in_month(log_of("close")),
            "_edge_eta": (log_of("high") + log_of("low")) / 2.0,
        },
        {
            "_edge_eta_prev": previous_in_month(eta),
            "_edge_valid": present,
        },
        {
            f"_edge_{name}": masked(expr)
            for name, expr in zip(names, (eta - o, o - eta1, eta - c1, c1 - eta1, o - c1,
                                          ((H != L) | (L != C1)).cast(pl.Float64)))
        },
    )
    r1, r2, r3, r4, r5, tau = (pl.col(f"_edge_{name}") for name in names)
    n = pl.col("n")
    per_month = {  # A = -4 / po, B = -4 / pc, k_j = mean(r_j) / pt = sum(r_j) / sum(tau)
        "_edge_A": -4.0 * n / pl.col("po"),
        "_edge_B": -4.0 * n / pl.col("pc"),
        **{f"_edge_k{r[1]}": pl.col(r) / pl.col("tau") for r in ("r1", "r3", "r5")},
    }
    A, B, k1, k3, k5 = (pl.col(name) for name in per_month)
    d1, d3, d5 = r1 - tau * k1, r3 - tau * k3, r5 - tau * k5
    x1 = A * d1 * r2 + B * d3 * r4
    x2 = A * d1 * r5 + B * d5 * r4
    sums: dict[str, pl.Expr] = {
        "n": valid,
        "tau": tau,
        "po": tau * ((O != H).cast(pl.Float64) + (O != L).cast(pl.Float64)),
        "pc": tau * ((C1 != H1).cast(pl.Float64) + (C1 != L1).cast(pl.Float64)),
        "r1": r1, "r3": r3, "r5": r5,
        "x1": x1, "x2": x2, "x1^2": x1 * x1, "x2^2": x2 * x2,
    }
    e1, e2 = pl.col("_e1"), pl.col("_e2")
    moments = {"_e1": pl.col("x1") / n, "_e2": pl.col("x2") / n}
    variances = {"_v1": pl.col("x1^2") / n - e1 * e1, "_v2": pl.col("x2^2") / n - e2 * e2}
    v1, v2 = pl.col("_v1"), pl.col("_v2")
    s2 = pl.when(v1 + v2 > 0).then((v2 * e1 + v1 * e2) / (v1 + v2)).otherwise((e1 + e2) / 2.0)
    spread = s2.abs().sqrt()
    if signed:
        spread = spread * s2.sign()
    reason = (
        pl.when(n == 0).then(pl.lit("no_consecutive_days"))
        .when(pl.col("tau") < 2).then(pl.lit("too_few_moving_days"))
        .when((pl.col("po") == 0) | (pl.col("pc") == 0)).then(pl.lit("no_range"))
        .otherwise(None)
        .cast(pl.String)
    )
    return Plan(
        steps=steps,
        sums=sums,
        per_month=per_month,
        monthly_steps=(moments, variances),
        monthly=(
            pl.when(reason.is_null()).then(spread).otherwise(None).cast(pl.Float64).alias("edge_spread"),
            n.cast(pl.Int64).alias("n_obs"),
            reason.alias("reason"),
        ),
    )


__all__ = ["edge_plan", "edge_spread"]
