"""The daily market return used by measures that net out market moves."""

from __future__ import annotations

import numpy as np
import polars as pl

from liqpanel.core.contracts import require_columns
from liqpanel.core.errors import ConfigError
from liqpanel.measures.neighbours import SORTED_MARK

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
    daily return, like ``ret``. Row order is kept. The day's sums are added
    in security order, so the result does not depend on the row order.
    """
    if weighting not in WEIGHTINGS:
        raise ConfigError(f"add_market_return: `weighting` must be one of {WEIGHTINGS}, got {weighting!r}")
    names = daily.collect_schema().names()
    if "mkt_ret" in names:
        return daily
    require_columns(daily, ["security", "date", "ret"], table="daily")
    ret = pl.col("ret")
    in_order = SORTED_MARK in names  # sorted by security and date already (the measures stage's table)
    ordered = daily if in_order else daily.sort("security", "date")
    if weighting == "equal":
        weight = pl.lit(1.0)
    else:
        require_columns(daily, ["close", "shares_out"], table="daily")
        same_security = pl.col("security").shift(1) == pl.col("security")
        previous_value = pl.when(same_security).then((pl.col("close") * pl.col("shares_out")).shift(1))
        implied_value = pl.col("close") / (1.0 + ret) * pl.col("shares_out")
        weight = pl.coalesce(previous_value, implied_value)
    usable = ret.is_not_null() & (weight > 0)
    parts = ordered.select(
        pl.col("date").cast(pl.Int32).alias("day"),
        pl.when(usable).then(weight).otherwise(0.0).alias("w"),
        pl.when(usable).then(weight * ret).otherwise(0.0).alias("wr"),
    ).collect(engine="in-memory")
    if parts.height == 0:
        return daily.with_columns(pl.lit(None, dtype=pl.Float64).alias("mkt_ret"))
    day = parts["day"].to_numpy()
    first = int(day.min())
    index = day - first
    # Sums per day added in row order, i.e. in security order within each
    # date: the same digits whatever order the input rows came in.
    total = np.bincount(index, weights=parts["wr"].to_numpy())
    weights = np.bincount(index, weights=parts["w"].to_numpy())  # positive exactly where a row is usable
    with np.errstate(divide="ignore", invalid="ignore"):
        by_day = np.where(weights > 0, total / weights, np.nan)
    if in_order:  # rows are in the order of ``parts``: read each row's day off the array
        return daily.with_columns(pl.Series("mkt_ret", by_day[index], nan_to_null=True))
    market = pl.DataFrame(
        {"date": np.arange(first, first + len(by_day), dtype=np.int32), "mkt_ret": by_day}, nan_to_null=True
    ).with_columns(pl.col("date").cast(pl.Date))
    return daily.join(market.lazy(), on="date", how="left", maintain_order="left")


__all__ = ["WEIGHTINGS", "add_market_return"]
