"""The clean stage's rules that look at one row: the sample and its month partitions, missing fields, prices, sessions, venues, codes."""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

import polars as pl

from liqpanel.core.contracts import follows_previous
from liqpanel.core.errors import ConfigError
from liqpanel.markets.several import attach, local_clock, session_index


TRADE_RULES = (
    "unparseable", "missing_field", "outside_sample", "nonpositive", "outside_session", "excluded_venue",
    "correction", "excluded_condition", "duplicate", "merged_same_time", "outside_quotes", "no_quote", "outlier",
)
QUOTE_RULES = (
    "unparseable", "missing_field", "outside_sample", "nonpositive", "outside_session", "excluded_venue",
    "duplicate", "crossed_quote", "merged_same_time", "wide_spread",
)
RULES = tuple(dict.fromkeys(TRADE_RULES + QUOTE_RULES))
RULES_OF = {"trades": TRADE_RULES, "quotes": QUOTE_RULES}
MISSING_SECURITY = "(missing)"
_ORDER = ["security", "ts", "_file", "_row"]
TRADE_COLUMNS = ["security", "ts", "price", "size", "venue", "cond", "correction"]
QUOTE_COLUMNS = ["security", "ts", "bid", "ask", "bid_size", "ask_size", "venue"]


def _with_helpers(frame: pl.LazyFrame) -> pl.LazyFrame:
    """Add the reader's helper columns to a frame that lacks them (e.g. built in a test)."""
    names = frame.collect_schema().names()
    extra = []
    if "_file" not in names:
        extra.append(pl.lit(0, dtype=pl.Int32).alias("_file"))
    if "_row" not in names:
        extra.append(pl.int_range(pl.len(), dtype=pl.Int64).alias("_row"))
    for column in ("_bad", "_value"):
        if column not in names:
            extra.append(pl.lit(None, dtype=pl.String).alias(column))
    return frame.with_columns(extra) if extra else frame


def months_of(month: str | list[str]) -> list[str]:
    """A month partition ('YYYY-MM') or a list of consecutive ones, as a list."""
    return [month] if isinstance(month, str) else list(month)


def _partition(frame: pl.LazyFrame, market: dict, *, month: str | list[str], sample: tuple[str, str]) -> pl.LazyFrame:
    """The rows of one month partition (or of consecutive ones, ``month`` a list) in (security, ts, file,
    row) order, with local date and time of day and the local month number ``_month``.

    Rows dated before the sample (or without a timestamp) belong to the first
    partition, rows after it to the last, so every row lands in one partition.
    The rows are put in order before the local columns are added, so the
    sort moves fewer columns. Several months are one frame in that order:
    each month's rows are then in the order of that month's own partition.
    """
    first, last = sample
    months = months_of(month)
    near = attach(_with_helpers(frame).filter(_near_months(months, first, last)), market)
    frame = _in_order(near.with_columns(pl.col("security").fill_null(MISSING_SECURITY)).collect())
    # the rows' own first and last instants bound the local clock's offsets: a month's
    # window, or more in the first and last partitions (liqpanel.markets.local_clock)
    utc = pl.col("ts").dt.convert_time_zone("UTC")
    span = frame.select(utc.min().alias("lo"), utc.max().alias("hi")).row(0)
    day, clock = local_clock(pl.col("ts"), market, span if None not in span else None)
    frame = frame.lazy().with_columns(
        day.alias("date"),
        (day.dt.year().cast(pl.Int32) * 12 + day.dt.month().cast(pl.Int32) - 1).alias("_month"),
        clock.alias("_time"),
    )
    lo, hi = month_number(first), month_number(last)
    home = pl.col("_month").fill_null(lo).clip(lo, hi)  # before the sample: the first month; after: the last
    return frame.filter(home.is_between(month_number(months[0]), month_number(months[-1])))


def month_number(month: str) -> int:
    """'YYYY-MM' as months since year 0, the number ``_partition`` gives each row's local month."""
    year, mon = map(int, month.split("-"))
    return year * 12 + mon - 1


def _window(month: str) -> tuple[datetime, datetime]:
    """UTC instants from two days before the month to two days after it (no offset exceeds 14 hours)."""
    start = datetime.fromisoformat(f"{month}-01").replace(tzinfo=timezone.utc)
    end = (start + timedelta(days=32)).replace(day=1)
    return start - timedelta(days=2), end + timedelta(days=2)


def _near_months(months: list[str], first: str, last: str) -> pl.Expr:
    """A cheap UTC pre-filter: rows within two days of the local months (no offset exceeds 14 hours).

    Lets each partition skip most of a large file before any local-time work;
    the exact local-month test follows. ``months``: consecutive months.
    """
    lo, hi = _window(months[0])[0], _window(months[-1])[1]
    ts = pl.col("ts")
    keep = ts.is_null() | ((ts >= lo) & (ts < hi))
    if months[0] == first:
        keep = keep | (ts < hi)
    if months[-1] == last:
        keep = keep | (ts >= lo)
    return keep


def _code_rule(frame_names: list[str], column: str, setting: dict | None, rule: str) -> pl.Expr | None:
    """Drop test for a vendor code column mapped to keep/drop in the config (no codes in code)."""
    if not setting or not setting.get("codes"):
        return None
    if column not in frame_names:
        raise ConfigError(
            f"`clean: {rule}` maps codes of the column '{column}', which the input lacks; "
            f"map your column to '{column}' under `columns:` or remove the setting"
        )
    codes = setting["codes"]
    drop = [str(c) for c, action in codes.items() if action == "drop"]
    known = [str(c) for c in codes]
    unlisted = setting.get("unlisted", "keep")
    value = pl.col(column).str.strip_chars()
    separator = setting.get("separator")
    if separator:
        parts = value.str.split(separator).list.eval(pl.element().str.strip_chars()).list.eval(
            pl.element().filter(pl.element() != "")
        )
        dropped = parts.list.eval(pl.element().is_in(drop)).list.any()
        unknown = parts.list.eval(~pl.element().is_in(known)).list.any()
    else:
        dropped, unknown = value.is_in(drop), ~value.is_in(known)
    test = dropped
    if unlisted == "drop":
        test = test | unknown
    return test.fill_null(False)


def _common_rules(frame: pl.LazyFrame, market: dict, rules: dict, *, numeric: tuple[str, ...], sample) -> pl.Expr:
    """The row-by-row rules shared by trades and quotes, as one when/then chain."""
    names = frame.collect_schema().names()
    first, last = sample
    required = ["security", "ts", *numeric]
    missing = pl.any_horizontal([pl.col(c).is_null() for c in required]) | (pl.col("security") == MISSING_SECURITY)
    reason = pl.when(pl.col("_bad").is_not_null()).then(pl.lit("unparseable"))
    reason = reason.when(missing).then(pl.lit("missing_field"))
    outside = ~pl.col("_month").is_between(month_number(first), month_number(last))
    reason = reason.when(outside).then(pl.lit("outside_sample"))
    if rules.get("nonpositive", True):
        reason = reason.when(pl.any_horizontal([pl.col(c) <= 0 for c in numeric])).then(pl.lit("nonpositive"))
    if rules.get("outside_session", True):
        outside = session_index(market, pl.col("_time"), pl.col("date")).is_null()
        reason = reason.when(outside).then(pl.lit("outside_session"))
    venues = rules.get("venues")
    if venues and "venue" in names:
        reason = reason.when(~pl.col("venue").is_in([str(v) for v in venues]).fill_null(False)).then(
            pl.lit("excluded_venue")
        )
    return reason


def _mark(frame: pl.DataFrame | pl.LazyFrame, test: pl.Expr, rule: str) -> pl.DataFrame | pl.LazyFrame:
    """Give ``rule`` to the rows still kept where ``test`` holds."""
    return frame.with_columns(
        pl.when(pl.col("drop_rule").is_null() & test.fill_null(False)).then(pl.lit(rule))
        .otherwise(pl.col("drop_rule")).alias("drop_rule")
    )


def _in_order(frame: pl.DataFrame) -> pl.DataFrame:
    """The rows in (security, ts, _file, _row) order, nulls first, without sorting the strings.

    The securities get integer codes in text order (an Enum of the sorted
    distinct names). A vendor's file is usually in time order, so a stable
    sort on the code alone already puts each security's rows in time order;
    one pass over the sorted keys checks that, and only a file where it
    fails is sorted on the code, time, file and row. Either way the order
    is that of a sort on the four columns. The order is found on the keys
    alone, then every column is gathered once; the helper columns of values
    that did not parse are gathered only when they hold any.
    """
    frame = frame.rechunk()  # a gather from one chunk is about twice as fast
    names = frame.get_column("security").unique().sort()
    key = frame.select(pl.col("security").cast(pl.Enum(names)).to_physical().alias("_code"), *_ORDER[1:])
    rows = pl.int_range(pl.len(), dtype=pl.UInt32).alias("_at")
    at = key.select(rows.sort_by("_code", maintain_order=True)).to_series()
    if not key[at].select(_ascending_within("_code", _ORDER[1:])).item():
        at = key.select(rows.sort_by("_code", *_ORDER[1:])).to_series()
    blank = [c for c in ("_bad", "_value") if c in frame.columns and frame.get_column(c).null_count() == frame.height]
    ordered = frame.drop(blank)[at]
    return ordered.with_columns(frame.select(blank).clear(ordered.height)).select(frame.columns) if blank else ordered


def _ascending_within(group: str, columns: list[str]) -> pl.Expr:
    """True when each row of a run of equal ``group`` follows the one before it in ``columns`` order (nulls first)."""
    after = follows_previous([pl.col(c).to_physical().cast(pl.Int64).fill_null(pl.Int64.min()) for c in columns])
    return ((pl.col(group) != pl.col(group).shift(1)) | after).fill_null(True).all()
