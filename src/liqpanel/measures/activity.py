"""Amihud (2002) illiquidity."""

from __future__ import annotations

import polars as pl

KEY = ["security", "month"]


def amihud_illiquidity(daily: pl.LazyFrame, *, scale: float = 1e6, **_) -> pl.LazyFrame:
    """Amihud (2002) illiquidity: ILLIQ = mean_t |r_t| / DV_t.

    The mean runs over the month's days with positive dollar volume and a
    return; DV is the day's dollar volume in the market's currency. The value
    is multiplied by ``scale`` (default 10^6: price change per million units
    of currency traded).

    Outputs: ``amihud``, ``n_obs`` (days used), ``reason`` ("zero_volume" when
    no day has positive dollar volume).
    """
    valid = (pl.col("dollar_volume") > 0) & pl.col("ret").is_not_null()
    ratio = pl.col("ret").abs() / pl.col("dollar_volume")
    return (
        daily.group_by(KEY)
        .agg(
            (ratio.filter(valid).mean() * scale).alias("amihud"),
            valid.sum().cast(pl.Int64).alias("n_obs"),
        )
        .with_columns(
            pl.when(pl.col("n_obs") == 0).then(pl.lit("zero_volume")).otherwise(None).cast(pl.String).alias("reason")
        )
        .sort(KEY)
    )
