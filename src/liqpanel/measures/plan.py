"""Measures as plans for a single pass over the daily table.

A measure from daily data is, nearly always, a formula of a handful of sums
per security-month: sums of per-day quantities (a log range squared, a
product of today's and yesterday's price change, an indicator of a zero
return). A ``Plan`` says exactly that and nothing more:

- ``sums``: named per-day quantities (polars expressions over the daily
  table, sorted by security and date, with the month flags of
  ``liqpanel.measures.neighbours``); each is summed over the security-month,
  a null adding nothing. Counts are sums of indicators.
- ``steps``: per-day intermediate columns, computed in order before the
  sums (each a mapping of column name to expression, one ``with_columns``);
  a value used several times is computed once this way instead of being
  repeated inside every expression that uses it. Names start with an
  underscore and the measure's short name; two plans may define the same
  column only with the same expression.
- ``lasts``: named per-day values whose last non-null value in the month is
  kept (shares outstanding at the month's end).
- ``per_month``: month constants, expressions over the plan's sums (by their
  names) and ``n_days``, that per-day expressions may use: each is
  computed once per month and put on every day of its month as a column of
  that name (a constant repeated, no join or window). Sums that use them
  are summed after the others. A formula of the form "sum over the days of
  f(day, month's means)" (a variance around the month's mean) then needs
  the sums of f, not the expansion of f into sums of every cross product.
- ``monthly_steps``: monthly intermediate columns over those sums (each a
  mapping of name to expression, one ``with_columns`` in order), so a
  month's constant used many times in a formula is computed once; names
  start with an underscore.
- ``monthly``: expressions over those sums (by the same names), ``n_days``
  (the month's rows) and the requested ``context`` columns, giving the
  measure's outputs, ``n_obs`` and ``reason``.

The measures stage gathers the plans of every selected measure, computes each
distinct per-day quantity once (two measures asking for the same expression
share it), sums each over the security-month's contiguous rows of the sorted
table (numpy's ``reduceat``), then evaluates each measure's monthly
expressions on the one-row-per-month frame. That is one sort and one pass
whatever the number of measures, instead of a pass, a group-by and a join
per measure. The pass works through the table in slices of whole
security-months (``BLOCK_ROWS`` rows or so), so its intermediate columns
take the memory of a slice, not of the table.

Means and variances are formed from sums (var = sum x^2 / n - mean^2). Where
that could lose digits (quantities whose mean is large against their spread)
a plan subtracts a per-month reference value first (``month_shifted``), the
shifted-data form of the variance: exact when the series is constant and as
accurate as the two-pass form otherwise.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np
import polars as pl

from liqpanel.core.contracts import follows_previous
from liqpanel.measures.neighbours import (FIRST_OF_MONTH, LAST_OF_MONTH, SORTED_MARK, mark_pair_breaks, month_flags,
                                          open_day_numbers)

KEY = ["security", "month"]
MONTH_ID = "_month_id"
CONTEXTS = ("market_days",)
BLOCK_ROWS = 131_072  # rows of the daily table a pass works on at once (see _blocks): its columns stay in cache
LOGS = {"open": "_log_open", "high": "_log_high", "low": "_log_low", "close": "_log_close", "ret": "_log_return"}


def log_of(column: str) -> pl.Expr:
    """The natural log of a daily price column (``ln(1 + ret)`` for ``"ret"``), computed once by ``prepare``."""
    return pl.col(LOGS[column])


def _logs(frame: pl.DataFrame) -> list[pl.Series]:
    """The logs of the price columns and of 1 + ret present in ``frame``, nulls kept.

    numpy's vectorised log, as many columns at a time as polars has threads
    (numpy releases the interpreter lock): several times faster than an
    engine's scalar log, and every measure shares the result. A log that is
    not a number (a negative price) is null, like a missing price.
    """
    present = [c for c in LOGS if c in frame.columns and frame.schema[c].is_numeric()]

    def one(column: str) -> pl.Series:
        values = frame[column].cast(pl.Float64).to_numpy()
        with np.errstate(divide="ignore", invalid="ignore"):
            logged = np.log(1.0 + values) if column == "ret" else np.log(values)
        return pl.Series(LOGS[column], logged, nan_to_null=True)

    with ThreadPoolExecutor(max_workers=pl.thread_pool_size()) as pool:
        return list(pool.map(one, present))


@dataclass(frozen=True)
class Plan:
    """How the measures stage computes one measure in its single pass (see the module docstring)."""

    sums: dict[str, pl.Expr]
    monthly: tuple[pl.Expr, ...]
    steps: tuple[dict[str, pl.Expr], ...] = ()
    lasts: dict[str, pl.Expr] = field(default_factory=dict)
    context: tuple[str, ...] = ()
    monthly_steps: tuple[dict[str, pl.Expr], ...] = ()
    per_month: dict[str, pl.Expr] = field(default_factory=dict)

    def __post_init__(self) -> None:
        unknown = [c for c in self.context if c not in CONTEXTS]
        if unknown:
            raise ValueError(f"plan context {unknown} unknown; known: {CONTEXTS}")


def month_shifted(expr: pl.Expr) -> pl.Expr:
    """``expr`` minus its first non-null value in the security-month.

    A constant per month, so variances and covariances formed from sums of
    the shifted values equal those of the original ones, without the loss of
    digits of sum x^2 - n mean^2 when the mean is large.
    """
    reference = pl.when(pl.col(FIRST_OF_MONTH)).then(expr.backward_fill()).forward_fill().fill_null(0.0)
    return expr - reference


def _is_sorted(frame: pl.DataFrame) -> bool:
    return bool(frame.select(follows_previous(["security", "date"]).slice(1).fill_null(False).all()).item())


def prepare(daily: pl.LazyFrame | pl.DataFrame, calendar=None) -> pl.DataFrame:
    """The daily table in (security, date) order with the month flags, ``MONTH_ID`` and the logs, in memory.

    A table that arrives sorted (the workflow writes its daily files sorted)
    is checked with one comparison of neighbouring rows instead of a sort.
    ``MONTH_ID`` numbers the security-months 0, 1, ... in table order and is
    flagged sorted, so the group-by over it works on contiguous slices.
    ``calendar``: the market's open days (``liqpanel.markets.trading_days``),
    which mark the pairs of rows an open day without a trade separates
    (``liqpanel.measures.neighbours.mark_pair_breaks``); None: no break.
    """
    frame = daily.collect(engine="in-memory") if isinstance(daily, pl.LazyFrame) else daily
    if SORTED_MARK in frame.columns and MONTH_ID in frame.columns:
        return frame if calendar is None else mark_pair_breaks(frame, calendar)
    if SORTED_MARK not in frame.columns:
        if not _is_sorted(frame):
            frame = frame.sort("security", "date")
        frame = month_flags(frame.lazy()).collect(engine="in-memory")
    if calendar is not None:
        frame = mark_pair_breaks(frame, calendar)
    month_id = (pl.col(FIRST_OF_MONTH).cum_sum() - 1).cast(pl.UInt32).set_sorted()
    return frame.with_columns(month_id.alias(MONTH_ID), *_logs(frame))


def _distinct(plans: dict[str, Plan], attribute: str) -> tuple[list[pl.Expr], dict[str, dict[str, str]]]:
    """The distinct expressions of all plans' ``attribute`` and, per measure, local name -> column name."""
    exprs: list[pl.Expr] = []
    names: dict[str, dict[str, str]] = {}
    for measure, plan in plans.items():
        names[measure] = {}
        for local, expr in getattr(plan, attribute).items():
            index = next((i for i, seen in enumerate(exprs) if seen.meta.eq(expr)), None)
            if index is None:
                index = len(exprs)
                exprs.append(expr)
            names[measure][local] = f"_{attribute}{index}"
    return exprs, names


def _steps(plans: dict[str, Plan]) -> list[dict[str, pl.Expr]]:
    """The plans' intermediate columns merged level by level; a name defined twice must mean the same."""
    levels: list[dict[str, pl.Expr]] = []
    for measure, plan in plans.items():
        for depth, step in enumerate(plan.steps):
            if depth == len(levels):
                levels.append({})
            for name, expr in step.items():
                known = next((level[name] for level in levels if name in level), None)
                if known is None:
                    levels[depth][name] = expr
                elif not known.meta.eq(expr):
                    raise ValueError(f"measure '{measure}': intermediate column {name!r} is defined differently by another measure")
    return levels


def _per_month(plans: dict[str, Plan]) -> dict[str, tuple[str, pl.Expr]]:
    """Every plan's month constants: name -> (measure, expression); a name defined twice must mean the same."""
    out: dict[str, tuple[str, pl.Expr]] = {}
    for measure, plan in plans.items():
        for name, expr in plan.per_month.items():
            if name in out and not out[name][1].meta.eq(expr):
                raise ValueError(f"measure '{measure}': month constant {name!r} is defined differently by another measure")
            out.setdefault(name, (measure, expr))
    return out


def _blocks(prepared: pl.DataFrame, rows: int | None = None) -> list[pl.DataFrame]:
    """``prepared`` cut into slices of about ``rows`` rows, each starting on a security-month's first day.

    A security-month never spans two slices, and shifts and fills in a slice
    are masked by the month flags, so the slices give the same sums as the
    whole table while their intermediate columns stay small (memory is
    reused from one slice to the next instead of growing with the table).
    """
    rows = rows or BLOCK_ROWS
    starts = prepared.select(pl.arg_where(pl.col(FIRST_OF_MONTH))).to_series().to_numpy()
    if prepared.height <= rows or len(starts) < 2:
        return [prepared]
    cuts = np.unique(starts[np.searchsorted(starts, np.arange(rows, prepared.height, rows)).clip(max=len(starts) - 1)])
    bounds = [0, *[int(c) for c in cuts if c > 0], prepared.height]
    return [prepared.slice(a, b - a) for a, b in zip(bounds[:-1], bounds[1:]) if b > a]


def with_steps(table: pl.LazyFrame, steps: list[dict[str, pl.Expr]] | tuple[dict[str, pl.Expr], ...]) -> pl.LazyFrame:
    """``table`` with the intermediate columns of ``steps`` added, one ``with_columns`` per step, in order."""
    for step in steps:
        table = table.with_columns(**step)
    return table


def _market_days(base: pl.DataFrame, prepared: pl.DataFrame, calendar=None) -> pl.Series:
    """Market trading days of each security-month within the security's listed span.

    The market's trading days are the open days of its calendar when one is
    given (``liqpanel.markets.trading_days``: a closed day is not a day, an
    open day without a trade is a no-trade day), else, the fallback, the
    dates on which any security of the table has a row. The listed span
    runs from the security's first to its last date in the table
    (convention of this project, see
    ``liqpanel.measures.impact.zero_return_share``). Days are numbered
    through a calendar array (one cell per calendar day), so no join or sort
    of the daily rows is needed.
    """
    if prepared.height == 0:
        return pl.Series("market_days", [], dtype=pl.Int64)
    day = prepared["date"].cast(pl.Int32).to_numpy()
    if calendar is not None:
        return open_days_listed(base, open_day_numbers(calendar))
    origin = int(day.min())
    present = np.zeros(int(day.max()) - origin + 1, dtype=bool)
    present[day - origin] = True
    number = np.cumsum(present) - 1  # the market-day number of each calendar day that is one
    month_of = np.zeros(len(present), dtype=np.int32)
    month_of[day - origin] = prepared["month"].cast(pl.Int32).to_numpy()
    days = np.flatnonzero(present)
    span = (
        pl.DataFrame({"_month": month_of[days], "_day": number[days]})
        .group_by("_month")
        .agg(pl.col("_day").min().alias("_m_first"), pl.col("_day").max().alias("_m_last"))
    )

    def numbered(column: str) -> pl.Series:
        return pl.Series(number[base[column].cast(pl.Int32).to_numpy() - origin])

    spans = (
        pl.DataFrame({
            "security": base["security"],
            "_month": base["month"].cast(pl.Int32),
            "_s_first": numbered("_first_date"),
            "_s_last": numbered("_last_date"),
        })
        .with_columns(pl.col("_s_first").min().over("security"), pl.col("_s_last").max().over("security"))
        .join(span, on="_month", how="left", maintain_order="left")
    )
    days_listed = (
        pl.min_horizontal(pl.col("_s_last"), pl.col("_m_last")).cast(pl.Int64)
        - pl.max_horizontal(pl.col("_s_first"), pl.col("_m_first")).cast(pl.Int64)
        + 1
    )
    return spans.select(days_listed.alias("market_days")).to_series()


def open_days_listed(base: pl.DataFrame, calendar: np.ndarray) -> pl.Series:
    """Open days of the calendar in each security-month within the security's listed span (binary searches)."""
    listed = base.select(
        pl.col("_first_date").min().over("security").cast(pl.Int32),
        pl.col("_last_date").max().over("security").cast(pl.Int32),
        pl.col("month").cast(pl.Int32).alias("_month_first"),
        pl.col("month").dt.month_end().cast(pl.Int32).alias("_month_last"),
    )
    lo = np.maximum(listed["_month_first"].to_numpy(), listed["_first_date"].to_numpy())
    hi = np.minimum(listed["_month_last"].to_numpy(), listed["_last_date"].to_numpy())
    count = np.searchsorted(calendar, hi, side="right") - np.searchsorted(calendar, lo, side="left")
    return pl.Series("market_days", np.maximum(count, 0), dtype=pl.Int64)


def _indicators(prepared: pl.DataFrame, levels: list[dict[str, pl.Expr]], sums: list[pl.Expr],
                constants: dict[str, tuple[str, pl.Expr]]) -> set[int]:
    """The positions in ``sums`` of the per-day quantities that are true/false indicators (their sums are counts).

    Read off the schema of the pass on an empty slice of the table, the month
    constants standing in as numbers.
    """
    empty = prepared.head(0).lazy().with_columns(pl.lit(None, dtype=pl.Float64).alias(name) for name in constants)
    schema = with_steps(empty, levels).select(expr.alias(f"_{i}") for i, expr in enumerate(sums)).collect_schema()
    return {i for i in range(len(sums)) if schema[f"_{i}"] == pl.Boolean}


def _summand(expr: pl.Expr, indicator: bool) -> pl.Expr:
    """A per-day quantity as the pass sums it: a null adds nothing; an indicator as a byte (0 or 1), else a float."""
    if indicator:
        return expr.fill_null(False).cast(pl.UInt8)
    return expr.cast(pl.Float64).fill_null(0.0)


def evaluate(
    prepared: pl.DataFrame, plans: dict[str, Plan], calendar=None
) -> tuple[pl.DataFrame, dict[str, pl.DataFrame]]:
    """Run the plans in one pass over ``prepare``'s output.

    ``calendar``: the market's open days, for the ``market_days`` context
    (see ``_market_days``); None infers them from the data.

    Returns the months (``security``, ``month``, ``n_days``, in table order:
    sorted by security and month) and, per measure, its ``monthly`` columns
    row-aligned with the months.
    """
    sums, sum_names = _distinct(plans, "sums")
    lasts, last_names = _distinct(plans, "lasts")
    wants_context = {c for plan in plans.values() for c in plan.context}
    constants = _per_month(plans)
    # Sums that use a month constant come second: the constants are formed from the first ones, per slice.
    late = [i for i, expr in enumerate(sums) if set(expr.meta.root_names()) & set(constants)]
    early = [i for i in range(len(sums)) if i not in late]
    late_inputs = sorted({c for i in late for c in sums[i].meta.root_names()} - set(constants))
    # The per-day quantities are columns of the whole sorted table (shifts and
    # fills cross security-months there; the month flags mask them). Each
    # security-month is a run of contiguous rows, so a monthly sum is a
    # segment sum (numpy's reduceat, added in row order: the same digits on
    # every run, one column per thread of the polars pool) and the month's
    # keys are read off its first row.
    levels = _steps(plans)
    counts = _indicators(prepared, levels, sums, constants)
    quantities = [
        *[_summand(sums[i], i in counts).alias(f"_sums{i}") for i in early],
        *[expr.alias(f"_lasts{i}") for i, expr in enumerate(lasts)],
    ]

    def segment_sum(column: np.ndarray, starts: np.ndarray) -> np.ndarray:
        if column.dtype == np.uint8:  # an indicator: counted in integers (exact, as its float sum is), a byte a day
            return np.add.reduceat(column, starts, dtype=np.int64).astype(np.float64)
        return np.add.reduceat(column, starts)

    def segment_sums(values: pl.DataFrame, indices: list[int], starts: np.ndarray, pool) -> dict[int, np.ndarray]:
        if len(starts) == 0:  # no rows: reduceat needs at least one segment
            return {i: np.zeros(0) for i in indices}
        return dict(zip(indices, pool.map(lambda i: segment_sum(values[f"_sums{i}"].to_numpy(), starts), indices)))

    def month_constants(totals: dict[int, np.ndarray], n_days: np.ndarray) -> pl.DataFrame:
        """The month constants of every plan that has them, one row per month of the slice."""
        columns = []
        for name, (measure, expr) in constants.items():
            local = {key: pl.Series(key, totals[int(column[5:])]) for key, column in sum_names[measure].items()
                     if int(column[5:]) in totals}
            frame = pl.DataFrame([pl.Series("n_days", n_days), *local.values()])
            columns.append(frame.select(expr.cast(pl.Float64).alias(name)).to_series())
        return pl.DataFrame(columns)

    def one_pass(rows: pl.DataFrame, pool: ThreadPoolExecutor) -> pl.DataFrame:
        values = (
            with_steps(rows.lazy(), levels)
            .select(MONTH_ID, FIRST_OF_MONTH, LAST_OF_MONTH, *quantities, *late_inputs)
            .collect(engine="in-memory")
        )
        starts = values.select(pl.arg_where(pl.col(FIRST_OF_MONTH))).to_series().to_numpy()
        n_days = np.diff(np.append(starts, rows.height))
        totals = segment_sums(values, early, starts, pool)
        if late:  # the month constants on every day of their month, then the sums that use them
            repeated = month_constants(totals, n_days).select(pl.all().gather(np.repeat(np.arange(len(starts)), n_days)))
            second = (  # lazy: a sub-expression shared by several sums (EDGE's x1 in x1 and x1^2) is computed once
                pl.concat([values.select(late_inputs), repeated], how="horizontal").lazy()
                .select(*[_summand(sums[i], i in counts).alias(f"_sums{i}") for i in late])
                .collect(engine="in-memory")
            )
            totals.update(segment_sums(second, late, starts, pool))
        first = rows.select(*KEY, "date", FIRST_OF_MONTH).filter(pl.col(FIRST_OF_MONTH))
        monthly = first.select(
            *KEY,
            pl.Series("n_days", n_days, dtype=pl.Int64),
            *([pl.col("date").alias("_first_date")] if wants_context else []),
        ).with_columns(pl.Series(f"_sums{i}", totals[i]) for i in range(len(sums)))
        if wants_context:
            last_date = rows.select("date", LAST_OF_MONTH).filter(pl.col(LAST_OF_MONTH))["date"]
            monthly = monthly.with_columns(last_date.alias("_last_date"))
        if lasts:  # the last non-null value of the month: a small group-by
            picked = (
                values.lazy()
                .group_by(MONTH_ID, maintain_order=True)
                .agg(*[pl.col(f"_lasts{i}").drop_nulls().last() for i in range(len(lasts))])
                .drop(MONTH_ID)
                .collect(engine="in-memory")
            )
            monthly = pl.concat([monthly, picked], how="horizontal")
        return monthly

    with ThreadPoolExecutor(max_workers=pl.thread_pool_size()) as pool:
        monthly = pl.concat([one_pass(rows, pool) for rows in _blocks(prepared)])
    if "market_days" in wants_context:
        monthly = monthly.with_columns(_market_days(monthly, prepared, calendar))
    queries = []
    for measure, plan in plans.items():
        local = {**sum_names[measure], **last_names[measure]}
        inputs = monthly.lazy().select(
            "n_days", *plan.context, *[pl.col(column).alias(name) for name, column in local.items()]
        )
        for step in plan.monthly_steps:
            inputs = inputs.with_columns(**step)
        queries.append(inputs.select(*plan.monthly))
    results = dict(zip(plans, pl.collect_all(queries, engine="in-memory")))  # the monthly formulas side by side
    return monthly.select(*KEY, "n_days"), results


def run_plan(daily: pl.LazyFrame | pl.DataFrame, plan: Plan, calendar=None) -> pl.LazyFrame:
    """One measure's plan on a daily table: one row per (security, month) with its monthly columns, sorted.

    ``calendar``: the market's open days (see ``prepare`` and ``evaluate``), or None.
    """
    base, results = evaluate(prepare(daily, calendar), {"measure": plan}, calendar)
    return pl.concat([base.select(KEY), results["measure"]], how="horizontal").lazy()


def missing_reason(condition: pl.Expr, reason: str) -> pl.Expr:
    """``reason`` where ``condition`` holds, else null: the ``reason`` column of a plan."""
    return pl.when(condition).then(pl.lit(reason)).otherwise(None).cast(pl.String).alias("reason")


__all__ = ["CONTEXTS", "KEY", "LAST_OF_MONTH", "LOGS", "MONTH_ID", "Plan", "evaluate", "log_of", "missing_reason",
           "month_shifted", "open_days_listed", "prepare", "run_plan", "with_steps"]
