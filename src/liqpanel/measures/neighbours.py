"""A security's previous and next trading day within the same month.

Measures built from consecutive days (Corwin-Schultz, Abdi-Ranaldo, EDGE,
Yang-Zhang, Pastor-Stambaugh) need day t-1 or t+1 of the same security and
month. On a frame sorted by (``security``, ``date``) that is the neighbouring
row, kept only where the neighbour has the same security and month: a plain
shift of the whole column plus a mask. It gives the same values as
``expr.shift(k).over(["security", "month"], order_by="date")`` without a
window group-by, which on a large panel is many times slower.

The caller must sort the frame by (``security``, ``date``) first
(``in_security_date_order``); keys are unique by the daily contract, so the
order within a security is the date order.
"""

from __future__ import annotations

import polars as pl

KEY = ("security", "month")
SORTED_MARK = "_in_security_date_order"  # a column the measures stage adds once it has sorted the daily table


def in_security_date_order(daily: pl.LazyFrame) -> pl.LazyFrame:
    """The daily table sorted by (``security``, ``date``), so that no result depends on the row order.

    The measures stage sorts the table once and marks it with the column
    ``SORTED_MARK``; a marked table is returned as it is, which spares every
    measure a sort of the whole panel (the largest cost of a measure on a
    large panel).
    """
    if SORTED_MARK in daily.collect_schema().names():
        return daily
    return daily.sort("security", "date")


def same_month_neighbour(offset: int) -> pl.Expr:
    """True where the row ``offset`` rows before (``offset > 0``) or after is of the same security-month."""
    return pl.all_horizontal([pl.col(k).shift(offset) == pl.col(k) for k in KEY]).fill_null(False)


def previous_in_month(expr: pl.Expr) -> pl.Expr:
    """``expr`` on the security's previous trading day of the same month; null on its first day."""
    return pl.when(same_month_neighbour(1)).then(expr.shift(1))


def next_in_month(expr: pl.Expr) -> pl.Expr:
    """``expr`` on the security's next trading day of the same month; null on its last day."""
    return pl.when(same_month_neighbour(-1)).then(expr.shift(-1))


def previous_valid_in_month(expr: pl.Expr) -> pl.Expr:
    """The last non-null value of ``expr`` on an earlier day of the same security-month; null if none.

    The neighbour of the series with its nulls dropped, as if the surviving
    days were consecutive.
    """
    row = pl.int_range(pl.len())
    last_valid = pl.when(expr.is_not_null()).then(row).forward_fill().shift(1)
    month_start = pl.when(~same_month_neighbour(1)).then(row).forward_fill()
    return pl.when(last_valid >= month_start).then(expr.forward_fill().shift(1))


__all__ = ["SORTED_MARK", "in_security_date_order", "next_in_month", "previous_in_month", "previous_valid_in_month", "same_month_neighbour"]
