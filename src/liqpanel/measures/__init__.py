"""Monthly measures: the registry and the measures stage.

``compute_monthly`` takes the daily table of one or more months and the
config's ``measures:`` mapping and returns one row per (security, month)
with ``n_days`` and, for every selected measure, its outputs, ``<name>_n``
(observations used) and ``<name>_reason`` (why a value is missing).
"""

from __future__ import annotations

from typing import Any

import polars as pl

from liqpanel.contracts import check_unique_key
from liqpanel.errors import ConfigError
from liqpanel.measures import benchmarks as _benchmarks  # noqa: F401  (high-frequency benchmarks)
from liqpanel.measures import library as _library  # noqa: F401  (low-frequency measures)
from liqpanel.measures.neighbours import SORTED_MARK
from liqpanel.measures.registry import REGISTRY, Measure, get_measure, register, resolve_options
from liqpanel.partition import PREVIOUS_DAY, with_previous_day

KEY = ["security", "month"]


def _needs_market_return(names: list[str]) -> bool:
    return any("mkt_ret" in REGISTRY[n].columns for n in names)


def _sorted_once(daily: pl.LazyFrame) -> pl.LazyFrame:
    """The daily table in (security, date) order, marked so that no measure sorts it again.

    A table that arrives sorted (the workflow writes its daily files sorted)
    is checked with one comparison of neighbouring rows instead of a sort.
    """
    frame = daily.collect(engine="in-memory")
    security, date = pl.col("security"), pl.col("date")
    ordered = (security.shift(-1) > security) | ((security.shift(-1) == security) & (date.shift(-1) > date))
    last = pl.int_range(pl.len()) == pl.len() - 1
    if not frame.select((ordered.fill_null(False) | last).all()).item():
        frame = frame.sort("security", "date")
    return frame.lazy().with_columns(pl.lit(True).alias(SORTED_MARK))


def compute_monthly(
    daily: pl.LazyFrame,
    selection: dict[str, dict[str, Any] | None],
    *,
    previous: pl.LazyFrame | None = None,
) -> pl.DataFrame:
    """Compute every selected measure per security-month.

    A measure whose ``n_obs`` is below its minimum gets a missing value and
    the reason ``too_few_days``; a value missing for another reason keeps the
    measure's own reason.

    A measure that lists ``from_previous_month`` among its required columns
    also gets, per security-month, the security's last day of the previous
    month, flagged True in that column (``liqpanel.partition``): taken from
    ``previous`` (the previous month partition's daily table) when given,
    else from ``daily`` itself. Other measures and ``n_days`` see the
    month's own days only, and no month is reported for a flagged day alone.
    """
    if not selection:
        raise ConfigError("`measures:` selects no measure; `liqpanel measures` lists them")
    names = list(selection)
    measures = [get_measure(n) for n in names]
    available = set(daily.collect_schema().names())
    if _needs_market_return(names) and "mkt_ret" not in available:
        from liqpanel.measures.market import add_market_return

        daily = add_market_return(daily)
        previous = add_market_return(previous) if previous is not None else None
        available.add("mkt_ret")
    wants_previous_day = any(PREVIOUS_DAY in m.columns for m in measures)
    if wants_previous_day:
        available.add(PREVIOUS_DAY)
    for m in measures:
        missing = [c for c in m.columns if c not in available]
        if missing:
            raise ConfigError(
                f"measure '{m.name}' needs daily column(s) {missing}, which the daily table lacks; "
                "drop the measure from `measures:` or supply the column"
            )
    daily = _sorted_once(daily)
    with_previous = daily
    if wants_previous_day:  # sorted by security, month and date: a lent day shares a date with a row of its own
        with_previous = with_previous_day(daily.drop(SORTED_MARK), previous).with_columns(pl.lit(True).alias(SORTED_MARK))
    result = daily.group_by(KEY).agg(pl.len().cast(pl.Int64).alias("n_days"))
    for m in measures:
        options = resolve_options(m, selection[m.name])
        min_days = options.pop("min_days")
        frame = m.function(with_previous if PREVIOUS_DAY in m.columns else daily, **options)
        cols = frame.collect_schema().names()
        if "reason" not in cols:
            frame = frame.with_columns(pl.lit(None, dtype=pl.String).alias("reason"))
        too_few = pl.col("n_obs") < min_days
        frame = frame.select(
            *KEY,
            *[pl.when(too_few).then(None).otherwise(pl.col(o)).cast(pl.Float64).alias(o) for o in m.outputs],
            pl.col("n_obs").cast(pl.Int64).alias(f"{m.name}_n"),
            pl.when(too_few)
            .then(pl.format("too_few_days ({} < {})", pl.col("n_obs"), pl.lit(min_days)))
            .otherwise(pl.col("reason"))
            .alias(f"{m.name}_reason"),
        )
        result = result.join(frame, on=KEY, how="left")
    out = result.sort(KEY).collect(engine="in-memory")  # bit-stable floats run to run
    return check_unique_key(out, KEY, table="monthly measures")


__all__ = ["REGISTRY", "Measure", "compute_monthly", "get_measure", "register", "resolve_options"]
