"""Amihud (2002) illiquidity."""

from __future__ import annotations

import polars as pl

from liqpanel.measures.plan import Plan, missing_reason, run_plan


def amihud_illiquidity(daily: pl.LazyFrame, *, scale: float = 1e6, **_) -> pl.LazyFrame:
    """Amihud (2002) illiquidity: ILLIQ = mean_t |r_t| / DV_t.

    The mean runs over the month's days with positive dollar volume and a
    return; DV is the day's dollar volume in the market's currency. The value
    is multiplied by ``scale`` (default 10^6: price change per million units
    of currency traded).

    Outputs: ``amihud``, ``n_obs`` (days used), ``reason`` ("zero_volume" when
    no day has positive dollar volume).
    """
    return run_plan(daily, amihud_plan(scale=scale))


def amihud_plan(*, scale: float = 1e6, **_) -> Plan:
    """The plan of ``amihud_illiquidity``."""
    valid = (pl.col("dollar_volume") > 0) & pl.col("ret").is_not_null()
    n = pl.col("n")
    return Plan(
        sums={"sum": pl.when(valid).then(pl.col("ret").abs() / pl.col("dollar_volume")), "n": valid},
        monthly=(
            pl.when(n > 0).then(pl.col("sum") / n * scale).alias("amihud"),
            n.cast(pl.Int64).alias("n_obs"),
            missing_reason(n == 0, "zero_volume"),
        ),
    )
