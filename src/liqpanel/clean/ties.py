"""The rules that look at a row's neighbours in time order: exact duplicates and trades or quotes at the same timestamp merged."""

from __future__ import annotations

import polars as pl

from liqpanel.clean.rules import _mark


def _survivor_window(expr: pl.Expr, by: list[str]) -> pl.Expr:
    """``expr`` evaluated over the kept rows of each group of ``by`` (dropped rows form their own groups)."""
    return expr.over([*by, pl.col("drop_rule").is_null()])


def _on_ties(frame: pl.DataFrame, step, changes: list[str]) -> pl.DataFrame:
    """Apply ``step`` to the rows that share security and timestamp with a neighbour; pass the rest through.

    ``step`` (a LazyFrame in and out) may change the columns ``changes`` of
    those rows; the rows stay where they are.

    In (security, ts, ...) order every group of one security and timestamp
    is a run of adjacent rows, so a rule that only acts within such groups
    (duplicates, same-time merges) gives the same result on these runs
    alone: rows alone at their timestamp are untouched by it. The runs are
    rare, so the rule's window works on a small frame, and its results are
    written back at the tied rows' positions.
    """
    same = ((pl.col("security") == pl.col("security").shift(1)) & (pl.col("ts") == pl.col("ts").shift(1))).fill_null(False)
    tie = frame.select(same | same.shift(-1).fill_null(False)).to_series()
    at = tie.arg_true()
    if not at.len():
        return frame
    ties = step(frame.filter(tie).lazy()).select(changes).collect()
    return frame.with_columns([frame.get_column(c).clone().scatter(at, ties.get_column(c)) for c in changes])


def _duplicates(frame: pl.DataFrame, columns: list[str]) -> pl.DataFrame:
    repeat = ~pl.struct(columns).is_first_distinct()
    return _on_ties(frame, lambda ties: _mark(ties, _survivor_window(repeat, []), "duplicate"), ["drop_rule"])


def _merge_same_time(frame: pl.DataFrame, medians: list[str], sums: list[str]) -> pl.DataFrame:
    """BNHLS (2009) T3/Q1: one record per security and timestamp with median values."""
    by = ["security", "ts"]
    kept = pl.col("drop_rule").is_null()

    def merge(ties: pl.LazyFrame) -> pl.LazyFrame:
        ties = ties.with_columns(
            *[pl.when(kept).then(_survivor_window(pl.col(c).median(), by)).otherwise(pl.col(c)).alias(c) for c in medians],
            *[pl.when(kept).then(_survivor_window(pl.col(c).sum(), by)).otherwise(pl.col(c)).alias(c) for c in sums],
        )
        return _mark(ties, _survivor_window(pl.int_range(pl.len()) > 0, by), "merged_same_time")

    return _on_ties(frame, merge, [*medians, *sums, "drop_rule"])
