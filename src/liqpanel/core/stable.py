"""Sums whose last digit does not depend on the order rows arrive in.

Floating-point addition is not associative: the same numbers added in
another order can differ in the last bit. Polars makes no promise about
row order after a join or a group-by, and it is free to drop a sort that
precedes an order-insensitive aggregation such as ``sum``; so a plain
``pl.col(x).sum()`` inside a group-by can change in its last digit from one
run to the next on the same data. These expressions add the values in the
order of a key column (within a group, e.g. the security), through a
cumulative sum, whose order the engine must respect. Use them where a
table's numbers are aggregated from rows whose order is not fixed.
"""

from __future__ import annotations

import polars as pl


def ordered_sum(expr: pl.Expr, by: str = "security") -> pl.Expr:
    """Sum of the non-missing values of ``expr``, added in the order of ``by`` (0 when none)."""
    return expr.sort_by(by).drop_nulls().cum_sum().last().fill_null(0.0)


def ordered_mean(expr: pl.Expr, by: str = "security") -> pl.Expr:
    """Mean of the non-missing values of ``expr``, added in the order of ``by`` (missing when none)."""
    count = expr.is_not_null().sum()
    return pl.when(count > 0).then(ordered_sum(expr, by) / count).otherwise(None)
