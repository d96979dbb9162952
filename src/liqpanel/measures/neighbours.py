"""A security's previous and next trading day within the same month.

Measures built from consecutive days (Corwin-Schultz, Abdi-Ranaldo, EDGE,
Yang-Zhang, Pastor-Stambaugh) need day t-1 or t+1 of the same security and
month. On a frame sorted by (``security``, ``date``) that is the neighbouring
row, kept only where the neighbour has the same security and month: a plain
shift of the whole column plus a mask. It gives the same values as
``expr.shift(k).over(["security", "month"], order_by="date")`` without a
window group-by, which on a large panel is many times slower.

The mask comes from two flag columns that ``in_security_date_order`` adds
once, when it sorts the table: ``FIRST_OF_MONTH`` (the row is its
security-month's first) and ``LAST_OF_MONTH``. Every helper below needs them.

Closed days and days without trades. With the market's trading calendar
(``mark_pair_breaks``, from ``liqpanel.markets.trading_days``) a third
flag, ``PAIR_BREAK``, marks a row whose previous row of the security lies
before an open day without a row (an open day on which the security did not
trade): the two rows are not consecutive trading days, and every helper
below treats the row as if it began a new month (no day t-1 for it, no day
t+1 for the row before). A closed day (a holiday, a weekend) between two
rows breaks nothing. Without a calendar the flag is False everywhere and
rows are consecutive whatever the dates between them (the fallback: the
market's days are not known).
"""

from __future__ import annotations

import numpy as np
import polars as pl

KEY = ("security", "month")
SORTED_MARK = "_in_security_date_order"  # True on a table sorted by security and date, with the flags below
FIRST_OF_MONTH = "_first_of_month"
LAST_OF_MONTH = "_last_of_month"
PAIR_BREAK = "_breaks_pair"  # True: an open day without a row lies between this row and the security's previous row


def month_flags(sorted_frame: pl.LazyFrame) -> pl.LazyFrame:
    """Add ``FIRST_OF_MONTH``, ``LAST_OF_MONTH``, ``SORTED_MARK`` and (False) ``PAIR_BREAK`` to a frame sorted by
    security and date; ``mark_pair_breaks`` sets the breaks from a calendar."""
    new = pl.any_horizontal([pl.col(k).shift(1) != pl.col(k) for k in KEY]).fill_null(True)
    return sorted_frame.with_columns(new.alias(FIRST_OF_MONTH)).with_columns(
        pl.col(FIRST_OF_MONTH).shift(-1).fill_null(True).alias(LAST_OF_MONTH),
        pl.lit(True).alias(SORTED_MARK),
        pl.lit(False).alias(PAIR_BREAK),
    )


def open_day_numbers(open_days) -> np.ndarray:
    """A calendar's open days (dates, a date Series or a frame with ``date``) as sorted day numbers (int32)."""
    if isinstance(open_days, pl.DataFrame):
        open_days = open_days["date"]
    series = pl.Series(open_days).cast(pl.Date)
    return np.unique(series.drop_nulls().cast(pl.Int32).to_numpy())


def mark_pair_breaks(flagged: pl.DataFrame, open_days) -> pl.DataFrame:
    """``PAIR_BREAK`` of a frame sorted by security and date (``month_flags``) from the market's open days.

    A row breaks the pair with the security's previous row when an open day
    lies strictly between their dates (the security did not trade on it).
    Whole columns: two binary searches of the dates in the calendar.
    """
    calendar = open_day_numbers(open_days)
    day = flagged["date"].cast(pl.Int32).to_numpy()
    before = np.searchsorted(calendar, day, side="left")  # open days strictly before each date
    through = np.searchsorted(calendar, day, side="right")  # open days up to and including it
    gap = np.zeros(len(day), dtype=bool)
    if len(day) > 1:
        gap[1:] = before[1:] > through[:-1]
    same = (pl.col("security") == pl.col("security").shift(1)).fill_null(False)
    return flagged.with_columns((pl.Series(PAIR_BREAK, gap) & same).alias(PAIR_BREAK))


def in_security_date_order(daily: pl.LazyFrame) -> pl.LazyFrame:
    """The daily table sorted by (``security``, ``date``) with the month flags, so no result depends on row order.

    A table already marked with ``SORTED_MARK`` (the measures stage sorts and
    flags the daily table once) is returned as it is, which spares every
    measure a sort of the whole panel.
    """
    if SORTED_MARK in daily.collect_schema().names():
        return daily
    return month_flags(daily.sort("security", "date"))


def previous_in_month(expr: pl.Expr) -> pl.Expr:
    """``expr`` on the security's previous trading day of the same month; null on its first day and after a break."""
    return pl.when(~pl.col(FIRST_OF_MONTH) & ~pl.col(PAIR_BREAK)).then(expr.shift(1))


def next_in_month(expr: pl.Expr) -> pl.Expr:
    """``expr`` on the security's next trading day of the same month; null on its last day and before a break."""
    return pl.when(~pl.col(LAST_OF_MONTH) & ~pl.col(PAIR_BREAK).shift(-1).fill_null(False)).then(expr.shift(-1))


def previous_valid_in_month(expr: pl.Expr) -> pl.Expr:
    """The last non-null value of a float ``expr`` on an earlier day of the same security-month; null if none.

    The neighbour of the series with its nulls dropped, as if the surviving
    days were consecutive. A forward fill that a month's first row stops: a
    null there becomes NaN, a value the fill carries instead of the previous
    month's, and NaN is read back as null (so a NaN in ``expr`` also counts
    as missing). A ``PAIR_BREAK`` row stops the fill like a month's first.
    """
    first = pl.col(FIRST_OF_MONTH) | pl.col(PAIR_BREAK)
    stopped = pl.when(first & expr.is_null()).then(float("nan")).otherwise(expr)
    return pl.when(~first).then(stopped.forward_fill().shift(1)).fill_nan(None)


__all__ = [
    "FIRST_OF_MONTH",
    "LAST_OF_MONTH",
    "PAIR_BREAK",
    "SORTED_MARK",
    "in_security_date_order",
    "mark_pair_breaks",
    "month_flags",
    "open_day_numbers",
    "next_in_month",
    "previous_in_month",
    "previous_valid_in_month",
]
