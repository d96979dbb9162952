"""The steps of a portfolio sort: usable rows, breakpoints and assignment, portfolio returns on a complete grid, summaries and the high-minus-low series."""

from __future__ import annotations

import polars as pl

from liqpanel.core.errors import InputError
from liqpanel.models.newey_west import newey_west_mean
from liqpanel.core.stable import ordered_mean, ordered_sum


KEY = ("security", "month")
BREAKPOINTS = ("pooled", "per_market")
MARKET = "market"  # the panel's market code (liqpanel.markets.several)


def breakpoint_groups(breakpoints: str) -> list[str]:
    """The columns within which breakpoints are formed, besides the month."""
    if breakpoints not in BREAKPOINTS:
        raise ValueError(f"breakpoints must be one of {BREAKPOINTS}, got {breakpoints!r}")
    return [MARKET] if breakpoints == "per_market" else []



def check_inputs(panel, needed_numeric, weight, breakpoint_universe, characteristics, n_values, min_securities,
                  groups=()):
    lazy = panel.lazy() if isinstance(panel, pl.DataFrame) else panel
    schema = lazy.collect_schema()
    names = schema.names()
    for column in groups:
        if column not in names:
            raise InputError(f"breakpoints per market need the panel's '{column}' column (a run with `markets:`); "
                             f"the panel has {sorted(names)}", column=column)
    for column in (*KEY, *needed_numeric, *([weight] if weight else []), *characteristics,
                   *([breakpoint_universe] if breakpoint_universe else [])):
        if column not in names:
            raise InputError(
                f"the portfolio sort needs a column '{column}' in the panel table, which has {sorted(names)}",
                column=column,
            )
    for column in (*needed_numeric, *([weight] if weight else []), *characteristics):
        if not schema[column].is_numeric():
            raise InputError(f"panel column '{column}' must be numeric for the sort, found {schema[column]}",
                             column=column)
    if breakpoint_universe and schema[breakpoint_universe] != pl.Boolean:
        raise InputError(
            f"breakpoint universe column '{breakpoint_universe}' must be boolean (true = sets breakpoints), "
            f"found {schema[breakpoint_universe]}",
            column=breakpoint_universe,
        )
    for label, value in n_values.items():
        if isinstance(value, bool) or not isinstance(value, int) or value < 2:
            raise ValueError(f"{label} must be an integer of at least 2, got {value!r}")
    if isinstance(min_securities, bool) or not isinstance(min_securities, int) or min_securities < 1:
        raise ValueError(f"min_securities must be a positive integer, got {min_securities!r}")
    return lazy


def usable_rows(lazy, needed_numeric, weight, breakpoint_universe, characteristics, groups=()):
    """Key, breakpoint groups, sort inputs and characteristics; flags rows complete in the sort inputs."""
    numeric = [*needed_numeric, *([weight] if weight else [])]
    cols = list(dict.fromkeys([*KEY, *groups, *numeric, *characteristics]))
    frame = lazy.select(
        *cols,
        (pl.col(breakpoint_universe).fill_null(False) if breakpoint_universe else pl.lit(True)).alias("_universe"),
    ).with_columns(pl.col(list(dict.fromkeys([*numeric, *characteristics]))).cast(pl.Float64))
    ok = pl.all_horizontal([pl.col(c).is_not_null() & pl.col(c).is_finite() for c in numeric]
                           + [pl.col(c).is_not_null() for c in groups])
    if weight:
        ok = ok & (pl.col(weight) > 0)
    return frame.with_columns(ok.alias("_complete"))


def assign(frame: pl.LazyFrame, on: str, n: int, by: list[str], label: str) -> tuple[pl.LazyFrame, pl.LazyFrame]:
    """Portfolio labels 1..n from the k/n quantiles of ``on`` in the universe, per ``by`` group."""
    in_universe = pl.col("_universe")
    bps = frame.group_by(by).agg(
        pl.col(on).filter(in_universe).count().alias("n_universe"),
        *[
            pl.col(on).filter(in_universe).quantile(k / n, interpolation="linear").alias(f"breakpoint_{k}")
            for k in range(1, n)
        ],
    )
    bps = bps.with_columns(
        [pl.when(pl.col("n_universe") >= n).then(pl.col(f"breakpoint_{k}")).otherwise(None).alias(f"breakpoint_{k}")
         for k in range(1, n)]
    )
    rank = pl.lit(1, dtype=pl.Int32)
    for k in range(1, n):
        rank = rank + (pl.col(on) > pl.col(f"breakpoint_{k}")).cast(pl.Int32)
    assigned = (
        frame.join(bps, on=by, how="left")
        .with_columns(pl.when(pl.col("n_universe") >= n).then(rank).otherwise(None).alias(label))
        .drop("n_universe", *[f"breakpoint_{k}" for k in range(1, n)])
    )
    return assigned, bps


def portfolio_returns(assigned: pl.LazyFrame, labels: list[str], ret: str, weight: str | None,
                       characteristics: list[str]) -> pl.LazyFrame:
    # sums run over each cell's securities in name order (liqpanel.core.stable), so
    # their last digit does not depend on the order in which rows arrive
    if weight:
        value = ordered_sum(pl.col(ret) * pl.col(weight)) / ordered_sum(pl.col(weight))
    else:
        value = ordered_mean(pl.col(ret))
    return assigned.group_by(["month", *labels]).agg(
        pl.len().cast(pl.Int64).alias("n_securities"),
        value.alias("ret"),
        *[ordered_mean(pl.col(c)).alias(c) for c in characteristics],
    )


def month_grid(months: pl.LazyFrame, sizes: dict[str, int]) -> pl.LazyFrame:
    grid = months
    for label, size in sizes.items():
        grid = grid.join(pl.LazyFrame({label: pl.int_range(1, size + 1, eager=True, dtype=pl.Int32)}), how="cross")
    return grid


def complete_grid(cells: pl.LazyFrame, grid: pl.LazyFrame, labels: list[str], min_securities: int,
                   characteristics: list[str]) -> pl.DataFrame:
    out = (
        grid.join(cells, on=["month", *labels], how="left")
        .with_columns(pl.col("n_securities").fill_null(0))
        .with_columns(
            pl.when(pl.col("n_securities") >= min_securities).then(pl.col("ret")).otherwise(None).alias("ret"),
            *[pl.when(pl.col("n_securities") >= min_securities).then(pl.col(c)).otherwise(None).alias(c)
              for c in characteristics],
        )
        .sort(["month", *labels])
        .collect(engine="in-memory")  # bit-stable means run to run
    )
    return out


def portfolio_summary(cells: pl.DataFrame, labels: list[str], characteristics: list[str], lags: int | None) -> pl.DataFrame:
    """Per portfolio: mean return with Newey-West t, months, average size, characteristics."""
    base = (
        cells.filter(pl.col("ret").is_not_null())
        .group_by(labels)
        .agg(
            pl.col("ret").sort_by("month").alias("_series"),
            pl.len().cast(pl.Int64).alias("n_months"),
            pl.col("n_securities").mean().alias("mean_n_securities"),
            *[pl.col(c).mean().alias(c) for c in characteristics],
        )
        .sort(labels)
    )
    stats = [newey_west_mean(series.to_numpy(), lags=lags) for series in base.get_column("_series")]
    every = cells.select(labels).unique().sort(labels)
    summary = base.drop("_series").with_columns(
        pl.Series("mean_ret", [s["mean"] for s in stats], dtype=pl.Float64),
        pl.Series("std_error", [s["std_error"] for s in stats], dtype=pl.Float64),
        pl.Series("tstat", [s["tstat"] for s in stats], dtype=pl.Float64),
    )
    summary = every.join(summary, on=labels, how="left").with_columns(pl.col("n_months").fill_null(0))
    return summary.select(*labels, "mean_ret", "std_error", "tstat", "n_months", "mean_n_securities",
                          *characteristics).sort(labels)


def high_minus_low_series(cells: pl.DataFrame, label: str, n: int, by: list[str]) -> pl.DataFrame:
    high = cells.filter(pl.col(label) == n).select("month", *by, pl.col("ret").alias("_high"))
    low = cells.filter(pl.col(label) == 1).select("month", *by, pl.col("ret").alias("_low"))
    return (
        high.join(low, on=["month", *by], how="inner")
        .filter(pl.col("_high").is_not_null() & pl.col("_low").is_not_null())
        .select("month", *by, (pl.col("_high") - pl.col("_low")).alias("ret"))
        .sort(["month", *by])
    )
