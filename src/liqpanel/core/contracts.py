"""Table contracts: our own column names, their types, and key checks.

User files are renamed into these names by the config's ``columns:`` mapping;
nothing downstream knows a vendor's layout.
"""

from __future__ import annotations

import polars as pl

from liqpanel.core.errors import InputError

TRADES = {"security": pl.String, "ts": pl.Datetime("us", "UTC"), "price": pl.Float64, "size": pl.Float64}
TRADES_OPTIONAL = {"venue": pl.String, "cond": pl.String, "correction": pl.String}
QUOTES = {"security": pl.String, "ts": pl.Datetime("us", "UTC"), "bid": pl.Float64, "ask": pl.Float64}
DAILY = {
    "security": pl.String,
    "date": pl.Date,
    "month": pl.Date,
    "open": pl.Float64,
    "high": pl.Float64,
    "low": pl.Float64,
    "close": pl.Float64,
    "volume": pl.Float64,
    "dollar_volume": pl.Float64,
    "n_trades": pl.Int64,
    "ret": pl.Float64,
}
MONTHLY_KEY = ("security", "month")
DAILY_KEY = ("security", "date")


def month_of(col: str | pl.Expr) -> pl.Expr:
    """First day of the calendar month of a date or datetime column."""
    expr = pl.col(col) if isinstance(col, str) else col
    return expr.dt.truncate("1mo").cast(pl.Date)


def follows_previous(keys: list[str | pl.Expr]) -> pl.Expr:
    """Per row: True where the row comes strictly after the row before it in the lexicographic order of
    ``keys`` (earlier keys decide, later ones break ties); null on the first row and where a key is null.

    One pass comparing neighbours tells whether a table is already in key order, which is much cheaper
    than sorting it to find out.
    """
    after = pl.lit(False)
    for key in reversed(keys):
        key = pl.col(key) if isinstance(key, str) else key
        after = (key > key.shift(1)) | ((key == key.shift(1)) & after)
    return after


def require_columns(frame: pl.LazyFrame | pl.DataFrame, columns, *, table: str, path: str | None = None) -> None:
    """Raise an InputError naming the first required column that is absent."""
    names = frame.collect_schema().names() if isinstance(frame, pl.LazyFrame) else frame.columns
    for column in columns:
        if column not in names:
            raise InputError(
                f"the {table} table needs a column '{column}' but has {sorted(names)}; "
                "map your column to it under `columns:` in the config",
                path=path,
                column=column,
            )


def check_unique_key(frame: pl.DataFrame, key, *, table: str) -> pl.DataFrame:
    """Check that ``key`` is non-missing and unique in ``frame``; return the frame."""
    key = list(key)
    nulls = frame.select(pl.any_horizontal(pl.col(key).is_null()).sum()).item()
    if nulls:
        raise InputError(f"the {table} table has {nulls} rows with a missing key {key}")
    dupes = frame.height - frame.select(key).unique().height
    if dupes:
        raise InputError(f"the {table} table has {dupes} duplicate keys {key}")
    return frame
