"""Every rule of a table in order: each row flagged with the first rule it breaks (quotes, then trades against them; the outlier filter)."""

from __future__ import annotations

import polars as pl

from liqpanel.clean.rules import QUOTE_COLUMNS, TRADE_COLUMNS, _code_rule, _common_rules, _mark, _partition
from liqpanel.clean.ties import _duplicates, _merge_same_time, _survivor_window
from liqpanel.bars.intraday import BY, prevailing_quotes


def flag_quotes(
    quotes: pl.LazyFrame, market: dict, rules: dict, *, month: str | list[str], sample: tuple[str, str]
) -> pl.LazyFrame:
    """Every quote of the partition (or of consecutive partitions, ``month`` a list) with ``drop_rule``
    (null when kept). Every rule works within a security and timestamp or a security-day, so the
    quotes of several months are flagged as each month's alone."""
    frame = _partition(quotes, market, month=month, sample=sample)
    frame = frame.with_columns(_common_rules(frame, market, rules, numeric=("bid", "ask"), sample=sample)
                               .otherwise(None).cast(pl.String).alias("drop_rule")).collect()
    names = frame.columns
    if rules.get("duplicates", True):
        frame = _duplicates(frame, [c for c in QUOTE_COLUMNS if c in names])
    setting = rules.get("quotes") or {}
    if setting.get("crossed", True):
        frame = _mark(frame, pl.col("ask") <= pl.col("bid"), "crossed_quote")
    if rules.get("same_timestamp", "merge") == "merge":
        sizes = [c for c in ("bid_size", "ask_size") if c in names]
        frame = _merge_same_time(frame, ["bid", "ask", *sizes], [])
    multiple = setting.get("wide_spread", 50)
    if multiple:
        spread = pl.col("ask") - pl.col("bid")
        frame = _mark(frame, spread > multiple * _survivor_window(spread.median(), ["security", "date"]), "wide_spread")
    return frame.lazy()


def flag_trades(
    trades: pl.LazyFrame,
    market: dict,
    rules: dict,
    *,
    month: str | list[str],
    sample: tuple[str, str],
    quotes: pl.LazyFrame | None = None,
) -> pl.DataFrame:
    """Every trade of the partition with ``drop_rule`` (null when kept) and ``_quoted``.

    ``quotes`` are the partition's clean quotes (or None): they feed the
    outside-quotes and no-quote rules. Collected here because the outlier
    filter works on a whole partition at once. ``month`` a list of
    consecutive months: their trades in one frame, each flagged as in its
    own month (every rule works within a security and timestamp or a
    security-day, and the quotes are matched within the security-day).
    """
    frame = _partition(trades, market, month=month, sample=sample)
    names = frame.collect_schema().names()
    reason = _common_rules(frame, market, rules, numeric=("price", "size"), sample=sample)
    for column, rule in (("correction", "correction"), ("cond", "excluded_condition")):
        test = _code_rule(names, column, rules.get("corrections" if rule == "correction" else "conditions"), rule)
        if test is not None:
            reason = reason.when(test).then(pl.lit(rule))
    frame = frame.with_columns(reason.otherwise(None).cast(pl.String).alias("drop_rule")).collect()
    if rules.get("duplicates", True):
        frame = _duplicates(frame, [c for c in TRADE_COLUMNS if c in names])
    if rules.get("same_timestamp", "merge") == "merge":
        frame = _merge_same_time(frame, ["price"], ["size"])
    frame = frame.lazy()
    if quotes is not None:
        frame = _match_quotes(frame, quotes, float(rules.get("quote_lag_seconds", 0.0)))
        if rules.get("outside_quotes", True):
            spread = pl.col("ask") - pl.col("bid")
            outside = (pl.col("price") > pl.col("ask") + spread) | (pl.col("price") < pl.col("bid") - spread)
            frame = _mark(frame, outside, "outside_quotes")
        if rules.get("unquoted_trades", "keep") == "drop":
            frame = _mark(frame, ~pl.col("_quoted"), "no_quote")
        frame = frame.drop("bid", "ask")
    else:
        frame = frame.with_columns(pl.lit(None, dtype=pl.Boolean).alias("_quoted"))
    flagged = frame.collect()
    setting = rules.get("outliers")
    if setting:
        flagged = _brownlees_gallo(flagged, setting)
    return flagged


def _match_quotes(frame: pl.LazyFrame, quotes: pl.LazyFrame, lag_seconds: float) -> pl.LazyFrame:
    """Kept trades get the prevailing ``bid`` and ``ask`` and ``_quoted``; dropped rows get nulls."""
    kept = pl.col("drop_rule").is_null()
    frame = frame.with_row_index("_at")  # both tables are in security and time order: no sort, rows stay put
    matched = prevailing_quotes(frame.filter(kept).select("_at", *BY, "ts"), quotes, lag_seconds, in_order=True)
    return (
        frame.join(matched.select("_at", "bid", "ask"), on="_at", how="left", maintain_order="left")
        .with_columns(pl.when(kept).then(pl.col("bid").is_not_null()).alias("_quoted"))
        .drop("_at")
    )


def _brownlees_gallo(flagged: pl.DataFrame, setting: dict) -> pl.DataFrame:
    from liqpanel.clean.outliers import neighbourhood_outliers  # numpy: loaded only when the filter is on

    kept = flagged.filter(pl.col("drop_rule").is_null()).select("security", "date", "price")
    group = kept.select(pl.struct("security", "date").rle_id()).to_series().to_numpy()
    outlier = neighbourhood_outliers(
        group,
        kept.get_column("price").to_numpy(),
        k=int(setting.get("k", 20)),
        delta=float(setting.get("delta", 0.10)),
        gamma=float(setting.get("gamma", 0.02)),
        threshold=float(setting.get("threshold", 3.0)),
    )
    if not outlier.any():
        return flagged
    # the outliers' rows in the flagged frame: kept rows, so their rule is still empty
    at = flagged.get_column("drop_rule").is_null().arg_true().filter(pl.Series(outlier))
    return flagged.with_columns(flagged.get_column("drop_rule").clone().scatter(at, "outlier"))
