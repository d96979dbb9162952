"""A security's previous and next trading day within the same month.

Measures built from consecutive days (Corwin-Schultz, Abdi-Ranaldo, EDGE,
Yang-Zhang, Pastor-Stambaugh) need day t-1 or t+1 of the same security and
month. On a frame sorted by (``security``, ``date``) that is the neighbouring
row, kept only where the neighbour has the same security and month: a plain
shift of the whole column plus a mask. It gives the same values as
``expr.shift(k).over(["security", "month"], order_by="date")`` without a
window group-by, which on a large panel is many times slower.

The caller must sort the frame by (``security``, ``date``) first; keys are
unique by the daily contract, so the order within a security is the date order.
"""

from __future__ import annotations

import polars as pl

KEY = ("security", "month")


def same_month_neighbour(offset: int) -> pl.Expr:
    """True where the row ``offset`` rows before (``offset > 0``) or after is of the same security-month."""
    return pl.all_horizontal([pl.col(k).shift(offset) == pl.col(k) for k in KEY]).fill_null(False)


def previous_in_month(expr: pl.Expr) -> pl.Expr:
    """``expr`` on the security's previous trading day of the same month; null on its first day."""
    return pl.when(same_month_neighbour(1)).then(expr.shift(1))


def next_in_month(expr: pl.Expr) -> pl.Expr:
    """``expr`` on the security's next trading day of the same month; null on its last day."""
    return pl.when(same_month_neighbour(-1)).then(expr.shift(-1))


__all__ = ["next_in_month", "previous_in_month", "same_month_neighbour"]
