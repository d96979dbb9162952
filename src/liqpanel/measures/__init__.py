"""Monthly measures: the registry and the measures stage.

``compute_monthly`` takes the daily table of one or more months and the
config's ``measures:`` mapping and returns one row per (security, month)
with ``n_days`` and, for every selected measure, its outputs, ``<name>_n``
(observations used) and ``<name>_reason`` (why a value is missing).
"""

from __future__ import annotations

from typing import Any

import polars as pl

from liqpanel.core.contracts import check_unique_key
from liqpanel.core.errors import ConfigError
from liqpanel.measures import benchmarks as _benchmarks  # noqa: F401  (high-frequency benchmarks)
from liqpanel.measures import blend as _blend  # noqa: F401  (the study's blend of spread estimators)
from liqpanel.measures import library as _library  # noqa: F401  (low-frequency measures)
from liqpanel.measures.market import add_market_return
from liqpanel.measures.neighbours import FIRST_OF_MONTH, LAST_OF_MONTH, PAIR_BREAK, SORTED_MARK, mark_pair_breaks, month_flags
from liqpanel.measures.plan import MONTH_ID, evaluate, prepare
from liqpanel.measures.registry import REGISTRY, Measure, get_measure, register, resolve_options
from liqpanel.core.partition import PREVIOUS_DAY, with_previous_day

KEY = ["security", "month"]


def _needs_market_return(names: list[str]) -> bool:
    return any("mkt_ret" in REGISTRY[n].columns for n in names)


def _finish(frame: pl.LazyFrame, measure: Measure, min_days: int) -> pl.LazyFrame:
    """A measure's monthly frame with the minimum-days rule applied and its diagnostics renamed."""
    if "reason" not in frame.collect_schema().names():
        frame = frame.with_columns(pl.lit(None, dtype=pl.String).alias("reason"))
    too_few = pl.col("n_obs") < min_days
    return frame.select(
        *[pl.when(too_few).then(None).otherwise(pl.col(o)).cast(pl.Float64).alias(o) for o in measure.outputs],
        pl.col("n_obs").cast(pl.Int64).alias(f"{measure.name}_n"),
        pl.when(too_few & ~((pl.col("n_obs") == 0) & pl.col("reason").is_not_null()))  # nothing counted: the measure says why
        .then(pl.format("too_few_days ({} < {})", pl.col("n_obs"), pl.lit(min_days)))
        .otherwise(pl.col("reason"))
        .alias(f"{measure.name}_reason"),
    )


def compute_monthly(
    daily: pl.LazyFrame,
    selection: dict[str, dict[str, Any] | None],
    *,
    previous: pl.LazyFrame | None = None,
    calendar=None,
) -> pl.DataFrame:
    """Compute every selected measure per security-month.

    A measure whose ``n_obs`` is below its minimum gets a missing value and
    the reason ``too_few_days`` (or its own reason when it counted nothing,
    e.g. ``no_tick_size``); a value missing for another reason keeps the
    measure's own reason.

    A measure that lists ``from_previous_month`` among its required columns
    also gets, per security-month, the security's last day of the previous
    month, flagged True in that column (``liqpanel.core.partition``): taken from
    ``previous`` (the previous month partition's daily table) when given,
    else from ``daily`` itself. Other measures and ``n_days`` see the
    month's own days only, and no month is reported for a flagged day alone.
    """
    if not selection:
        raise ConfigError("`measures:` selects no measure; `liqpanel measures` lists them")
    names = list(selection)
    measures = [get_measure(n) for n in names]
    available = set(daily.collect_schema().names())
    add_market = _needs_market_return(names) and "mkt_ret" not in available
    if add_market:
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
    prepared = prepare(daily, calendar)
    if add_market:  # on the sorted table: the day's sums run in security order without another sort
        prepared = add_market_return(prepared.lazy()).collect(engine="in-memory")
    options = {m.name: resolve_options(m, selection[m.name]) for m in measures}
    min_days = {name: opts.pop("min_days") for name, opts in options.items()}  # the rest go to the measure
    fused = [m for m in measures if m.plan is not None and PREVIOUS_DAY not in m.columns]
    months, planned = evaluate(prepared, {m.name: m.plan(**options[m.name]) for m in fused}, calendar)
    finished = pl.collect_all([_finish(planned[m.name].lazy(), m, min_days[m.name]) for m in fused], engine="in-memory")
    columns: dict[str, pl.DataFrame] = dict(zip([m.name for m in fused], finished))
    alone = [m for m in measures if m.name not in columns]
    if alone:  # measures without a plan run one by one on the same sorted table
        sorted_daily = prepared.drop(MONTH_ID).lazy()
        with_previous = sorted_daily
        if wants_previous_day:  # sorted by security, month and date: a lent day shares a date with a row of its own
            own = sorted_daily.drop(SORTED_MARK, FIRST_OF_MONTH, LAST_OF_MONTH, PAIR_BREAK)
            with_previous = month_flags(with_previous_day(own, previous))
            if calendar is not None:  # the lent day pairs with the month's first unless an open day lies between
                with_previous = mark_pair_breaks(with_previous.collect(engine="in-memory"), calendar).lazy()
        for m in alone:
            frame = m.function(with_previous if PREVIOUS_DAY in m.columns else sorted_daily, **options[m.name])
            frame = frame.collect(engine="in-memory") if isinstance(frame, pl.LazyFrame) else frame
            finished = pl.concat(
                [frame.select(KEY), _finish(frame.lazy(), m, min_days[m.name]).collect(engine="in-memory")],
                how="horizontal",
            )
            columns[m.name] = months.select(KEY).join(finished, on=KEY, how="left", maintain_order="left").drop(KEY)
    out = pl.concat([months, *[columns[n] for n in names]], how="horizontal")
    return check_unique_key(out, KEY, table="monthly measures")


from liqpanel.measures.frames import compute  # noqa: E402  (the notebook entry point uses compute_monthly)

__all__ = ["REGISTRY", "Measure", "compute", "compute_monthly", "get_measure", "register", "resolve_options"]
