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
"""

from __future__ import annotations

import polars as pl

KEY = ("security", "month")
SORTED_MARK = "_in_security_date_order"  # True on a table sorted by security and date, with the flags below
FIRST_OF_MONTH = "_first_of_month"
LAST_OF_MONTH = "_last_of_month"


def month_flags(sorted_frame: pl.LazyFrame) -> pl.LazyFrame:
    """Add ``FIRST_OF_MONTH``, ``LAST_OF_MONTH`` and ``SORTED_MARK`` to a frame sorted by security and date."""
    new = pl.any_horizontal([pl.col(k).shift(1) != pl.col(k) for k in KEY]).fill_null(True)
    return sorted_frame.with_columns(new.alias(FIRST_OF_MONTH)).with_columns(
        pl.col(FIRST_OF_MONTH).shift(-1).fill_null(True).alias(LAST_OF_MONTH),
        pl.lit(True).alias(SORTED_MARK),
    )


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
    """``expr`` on the security's previous trading day of the same month; null on its first day."""
    return pl.when(~pl.col(FIRST_OF_MONTH)).then(expr.shift(1))


def next_in_month(expr: pl.Expr) -> pl.Expr:
    """``expr`` on the security's next trading day of the same month; null on its last day."""
    return pl.when(~pl.col(LAST_OF_MONTH)).then(expr.shift(-1))


def previous_valid_in_month(expr: pl.Expr) -> pl.Expr:
    """The last non-null value of a float ``expr`` on an earlier day of the same security-month; null if none.

    The neighbour of the series with its nulls dropped, as if the surviving
    days were consecutive. A forward fill that a month's first row stops: a
    null there becomes NaN, a value the fill carries instead of the previous
    month's, and NaN is read back as null (so a NaN in ``expr`` also counts
    as missing).
    """
    first = pl.col(FIRST_OF_MONTH)
    stopped = pl.when(first & expr.is_null()).then(float("nan")).otherwise(expr)
    return pl.when(~first).then(stopped.forward_fill().shift(1)).fill_nan(None)


__all__ = [
    "FIRST_OF_MONTH",
    "LAST_OF_MONTH",
    "SORTED_MARK",
    "in_security_date_order",
    "month_flags",
    "next_in_month",
    "previous_in_month",
    "previous_valid_in_month",
]
