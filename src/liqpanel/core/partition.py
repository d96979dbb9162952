"""Month partitions: what a month's job reads, and the day it borrows.

The workflow runs the trade-level stages once per calendar month of the
sample (``work/<stage>/month=YYYY-MM/``), so a job's memory is bounded by the
month, not by the market. Two things cross a month boundary:

- Reading the trades. A month's clean job scans the whole trade file (or a
  glob of files) but keeps only rows whose timestamp can belong to the month.
  ``month_window`` (``stored_window`` for a file with separate date and time
  columns) builds that condition on the file's own columns, before any
  conversion, so Polars pushes it into the Parquet reader: row groups (and
  files) whose statistics lie outside the month are skipped. A
  file sorted by time, or one file per day or month, is read once in total
  over all months; a file sorted by security is still read once per month,
  but streamed, so memory stays bounded by the month.
- The previous trading day. Returns already chain across month ends (the
  daily stage reads the previous month's bars). Estimators built on pairs of
  consecutive days (the Corwin & Schultz 2012 overnight adjustment, the
  Ardia, Guidotti & Kroencke 2024 estimator) also need the last day of the
  previous month. ``with_previous_day`` adds it to each security-month's
  daily rows, flagged in the boolean column ``from_previous_month`` and
  stamped with the month it leads into, so it can never form a month of its
  own. ``liqpanel.measures.compute_monthly`` hands the flagged day only to
  measures that list ``from_previous_month`` among their required columns;
  every other measure, and ``n_days``, see the month's own days only.

Running the market as one partition or as many gives the same tables: the
tests compute both and compare them.
"""

from __future__ import annotations

from datetime import date, datetime, timedelta
from zoneinfo import ZoneInfo

import polars as pl

PREVIOUS_DAY = "from_previous_month"


def month_start(month: str, timezone: str) -> datetime:
    """Local midnight that opens ``month`` ('YYYY-MM') in ``timezone``, time-zone aware."""
    year, mon = map(int, month.split("-"))
    return datetime(year, mon, 1, tzinfo=ZoneInfo(timezone))


def next_month(month: str) -> str:
    year, mon = map(int, month.split("-"))
    k = year * 12 + mon
    return f"{k // 12:04d}-{k % 12 + 1:02d}"


def month_window(
    ts_dtype: pl.DataType, month: str, sample: tuple[str, str], timezone: str, column: str = "ts",
    zones: tuple[str, ...] = (),
) -> pl.Expr | None:
    """Condition on a raw trade-time column that keeps every row of a month partition.

    ``month`` is a partition of ``sample`` (first, last month) in the market's
    local time; rows before the sample belong to the first partition and
    rows after it to the last (``liqpanel.clean``). The condition is written
    on the column as stored, so Polars can evaluate it on Parquet statistics:

    - time-zone aware timestamps: [local start of month, local start of next
      month) as instants; the first partition also keeps everything earlier
      and missing timestamps, the last everything later. Exact.
    - naive timestamps (read as market local time): the same bounds on the
      local clock. A naive time that does not exist locally (a daylight-saving
      gap) becomes a missing timestamp and belongs to the first partition,
      so the first partition is not narrowed.
    - anything else (e.g. text): None, no narrowing.

    ``zones``: on several markets, the members' own zones (``timezone`` is
    then the zone naive times are read in): a row's month is that of its own
    market's clock, so the window runs from the earliest of the zones' local
    starts of the month to the latest of their starts of the next month.

    The exact assignment is still made by the cleaning stage; this condition
    only needs to keep a superset of the partition's rows.
    """
    first, last = sample
    if not isinstance(ts_dtype, pl.Datetime) or first == last:
        return None
    if ts_dtype.time_zone is None and month == first:
        return None
    # naive times are wall-clock times in ``timezone``; aware ones instants in the column's zone
    stored = ZoneInfo(ts_dtype.time_zone or timezone)
    starts = [month_start(month, z).astimezone(stored) for z in (zones or (timezone,))]
    ends = [month_start(next_month(month), z).astimezone(stored) for z in (zones or (timezone,))]
    lo, hi = min(starts), max(ends)
    if ts_dtype.time_zone is None:
        lo, hi = lo.replace(tzinfo=None), hi.replace(tzinfo=None)
    ts = pl.col(column)
    after = ts >= pl.lit(lo, dtype=ts_dtype)
    before = ts < pl.lit(hi, dtype=ts_dtype)
    if month == first:
        return before | ts.is_null()
    if month == last:
        return after
    return after & before


def stored_window(
    schema: pl.Schema, month: str, sample: tuple[str, str], timezone: str, zones: tuple[str, ...] = ()
) -> pl.Expr | None:
    """``month_window`` for a file as stored: on its ``ts`` column, or on its ``date`` column.

    A file that gives the time as two columns, ``date`` (the local trading
    date: a date, a datetime or a YYYYMMDD integer) and ``time``, is narrowed
    on the date with two days to spare on each side (a clock past midnight
    can move a trade to the next day), except in the first partition, which
    also takes every row whose time does not parse. Anything else: None.
    """
    if "ts" in schema:
        return month_window(schema["ts"], month, sample, timezone, zones=zones)
    if "date" not in schema or "time" not in schema or month == sample[0] or sample[0] == sample[1]:
        return None
    dtype = schema["date"]
    lo = first_day(month) - timedelta(days=2)
    hi = first_day(next_month(month)) + timedelta(days=2)
    if dtype == pl.Date:
        bounds = pl.lit(lo), pl.lit(hi)
    elif isinstance(dtype, pl.Datetime) and dtype.time_zone is None:
        bounds = tuple(pl.lit(datetime(d.year, d.month, d.day), dtype=dtype) for d in (lo, hi))
    elif dtype.is_integer():
        bounds = tuple(pl.lit(d.year * 10_000 + d.month * 100 + d.day, dtype=dtype) for d in (lo, hi))
    else:
        return None
    after = pl.col("date") >= bounds[0]
    return after if month == sample[1] else after & (pl.col("date") < bounds[1])


def spans(months: list[str], size: int) -> list[list[str]]:
    """The months cut into spans of ``size`` months, aligned on January (12: calendar years).

    One workflow job carries a span: its months are still written one
    partition each, so the tables do not depend on ``size``.
    """
    def block(month: str) -> int:
        year, mon = map(int, month.split("-"))
        return (year * 12 + mon - 1) // size

    out: list[list[str]] = []
    for month in months:  # a few hundred months at most, once per run
        if out and block(out[-1][-1]) == block(month):
            out[-1].append(month)
        else:
            out.append([month])
    return out


def with_previous_day(daily: pl.LazyFrame, previous: pl.LazyFrame | None = None) -> pl.LazyFrame:
    """Daily rows plus, per security-month, the security's last day of the previous month.

    The last day is looked up in ``previous`` (the previous month partition)
    when given, else in ``daily`` itself (a table of several months). The
    added row keeps its own date and values, takes the month it leads into,
    and has ``from_previous_month`` = True (False on every other row). It is
    added only where the security has days in both months: a security with no
    day in the previous calendar month gets none. Sorted by security, month and
    date, so the lent day sits just before the first day of the month it
    leads into (in a table of several months it shares its date with the
    previous month's own last row, which comes first).
    """
    daily = daily.with_columns(pl.lit(False).alias(PREVIOUS_DAY))
    names = daily.collect_schema().names()
    source = daily if previous is None else pl.concat(
        [previous.with_columns(pl.lit(False).alias(PREVIOUS_DAY)), daily], how="diagonal_relaxed"
    )
    carried = (
        source.sort("security", "date")
        .group_by("security", "month")
        .agg(pl.all().last())
        .with_columns(pl.col("month").dt.offset_by("1mo"), pl.lit(True).alias(PREVIOUS_DAY))
        .join(daily.select("security", "month").unique(), on=["security", "month"], how="semi")
    )
    return pl.concat([daily, carried], how="diagonal_relaxed").select(names).sort("security", "month", "date")


__all__ = ["PREVIOUS_DAY", "month_start", "month_window", "next_month", "spans", "stored_window", "with_previous_day"]


def first_day(month: str) -> date:
    """'YYYY-MM' as the first day of the month, the value of a table's ``month`` column."""
    return date.fromisoformat(f"{month}-01")
