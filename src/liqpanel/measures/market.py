"""The daily market return used by measures that net out market moves."""

from __future__ import annotations

import polars as pl

from liqpanel.contracts import require_columns
from liqpanel.errors import ConfigError

WEIGHTINGS = ("equal", "value")


def add_market_return(daily: pl.LazyFrame, weighting: str = "equal") -> pl.LazyFrame:
    """Add ``mkt_ret``, the day's market return, to the daily table when it is absent.

    ``weighting="equal"``: the mean of ``ret`` over the securities with a
    return that day. ``weighting="value"``: the mean weighted by each
    security's market value at the previous close, close_{t-1} x
    shares_out_{t-1} from its previous row in the input; on a security's first
    row in the input, where no previous row exists, the previous close is
    implied from the row itself as close_t / (1 + ret_t) (so a month partition
    needs no earlier file) with that row's shares_out.
    Rows without a return, or without a positive weight under value
    weighting, do not enter the mean; a day with no such row gets a null.
    The market is the set of securities in the input (convention of this
    project; common practice for a market-wide benchmark return).

    A table that already has ``mkt_ret`` is returned unchanged. Units: simple
    daily return, like ``ret``. Row order is kept.
    """
    if weighting not in WEIGHTINGS:
        raise ConfigError(f"add_market_return: `weighting` must be one of {WEIGHTINGS}, got {weighting!r}")
    names = daily.collect_schema().names()
    if "mkt_ret" in names:
        return daily
    require_columns(daily, ["security", "date", "ret"], table="daily")
    ret = pl.col("ret")
    if weighting == "equal":
        weight = pl.lit(1.0)
    else:
        require_columns(daily, ["close", "shares_out"], table="daily")
        previous_value = (pl.col("close") * pl.col("shares_out")).shift(1).over("security", order_by="date")
        implied_value = pl.col("close") / (1.0 + ret) * pl.col("shares_out")
        weight = pl.coalesce(previous_value, implied_value)
    usable = ret.is_not_null() & (weight > 0)
    # Running sums in security order within each date: the same float result
    # whatever the row order of the input.
    def total(expr: pl.Expr) -> pl.Expr:
        return expr.fill_null(0.0).sort_by("security").cum_sum().last()

    market = (
        daily.select("security", "date", pl.when(usable).then(weight).alias("_w"), pl.when(usable).then(ret).alias("_r"))
        .group_by("date")
        .agg(
            (total(pl.col("_w") * pl.col("_r")) / total(pl.col("_w"))).alias("mkt_ret"),
            pl.col("_w").count().alias("_n"),
        )
        .select("date", pl.when(pl.col("_n") > 0).then(pl.col("mkt_ret")).otherwise(None).alias("mkt_ret"))
    )
    return daily.join(market, on="date", how="left", maintain_order="left")


__all__ = ["WEIGHTINGS", "add_market_return"]
