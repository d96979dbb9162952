"""The clean stage: raw trades and quotes in, clean tables and an audit out.

Every row read ends in exactly one place: kept, or dropped by the first
named rule it breaks. Trades, in this order:

- ``unparseable``: a timestamp, price or size present in the file that does
  not parse (only with ``clean.unparseable: drop``; the default stops the
  run with an error naming the file, column, row and value)
- ``missing_field``: security, timestamp, price or size missing (common practice)
- ``outside_sample``: local date before the first or after the last month of
  the sample (these rows are accounted in the first/last partition)
- ``nonpositive``: price <= 0 or size <= 0 (common practice; Barndorff-Nielsen,
  Hansen, Lunde & Shephard 2009, rule P2, for zero prices)
- ``outside_session``: local time outside every session of the market
  profile, half days honoured (BNHLS 2009, rule P1); with a trading
  calendar (``calendar`` or ``holidays`` in the profile) every time of a
  closed day is outside (``liqpanel.markets.for_sample``)
- ``excluded_venue``: a venue not in ``clean.venues`` (BNHLS 2009, rule P3)
- ``correction``: a correction indicator that ``clean.corrections`` maps
  to drop (BNHLS 2009, rule T1)
- ``excluded_condition``: a sale condition that ``clean.conditions`` maps to
  drop (BNHLS 2009, rule T2)
- ``duplicate``: an exact copy of an earlier record (common practice)
- ``merged_same_time``: several trades of a security with the same
  timestamp are merged into the first of them, with the median price and the
  summed size (BNHLS 2009, rule T3; summing sizes keeps the volume); the
  others are counted here
- ``outside_quotes``: price above ask + spread or below bid - spread of the
  prevailing quote (BNHLS 2009, rule T4)
- ``no_quote``: no prevailing quote that day (only with
  ``clean.unquoted_trades: drop``; by default such trades are kept and
  counted in the audit column ``kept_without_quote``)
- ``outlier``: the neighbourhood filter of Brownlees & Gallo (2006), see
  ``liqpanel.outliers``

Quotes: ``unparseable``, ``missing_field`` (security, timestamp, bid, ask),
``outside_sample``, ``nonpositive`` (bid or ask <= 0, BNHLS P2),
``outside_session``, ``excluded_venue``, ``duplicate``, ``crossed_quote``
(ask <= bid; BNHLS 2009, rule Q2 drops ask < bid, a locked quote ask = bid is
dropped too), ``merged_same_time`` (median bid, median ask and median sizes;
BNHLS 2009, rule Q1), ``wide_spread`` (spread above ``clean.quotes.wide_spread``
times the security-day's median spread; BNHLS 2009, rule Q3, 50 times).
Crossed quotes are removed before same-time quotes are merged, so that a
crossed entry does not enter a median (convention of this project).

The BNHLS rule letters and the value 50 are quoted from memory from
Barndorff-Nielsen, O. E., P. R. Hansen, A. Lunde and N. Shephard (2009),
"Realized kernels in practice: trades and quotes", Econometrics Journal 12,
C1-C32.

The audit has one row per table, security and local date with
``rows_read``, ``rows_kept`` and ``drop_<rule>`` for every rule of both
tables (zero where a rule does not apply); kept + dropped = read.
Unsorted input is fine: rows are ordered by security, timestamp and their
position in the input before any rule that depends on order.
"""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

import polars as pl

from liqpanel.errors import ConfigError
from liqpanel.intraday import BY, prevailing_quotes
from liqpanel.marketset import attach, local_clock, session_index
from liqpanel.readers import HELPER_COLUMNS

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


def _survivor_window(expr: pl.Expr, by: list[str]) -> pl.Expr:
    """``expr`` evaluated over the kept rows of each group of ``by`` (dropped rows form their own groups)."""
    return expr.over([*by, pl.col("drop_rule").is_null()])


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
    key = [pl.col(c).to_physical().cast(pl.Int64).fill_null(pl.Int64.min()) for c in columns]
    after = pl.lit(False)
    for k in reversed(key):  # lexicographic: earlier columns decide, later ones break ties
        after = (k > k.shift(1)) | ((k == k.shift(1)) & after)
    return ((pl.col(group) != pl.col(group).shift(1)) | after).fill_null(True).all()


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
    from liqpanel.outliers import neighbourhood_outliers  # numpy: loaded only when the filter is on

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


def audit_of(
    flagged: pl.DataFrame | pl.LazyFrame, table: str, *, month: str | list[str], timestamps: str = "",
    sample: tuple[str, str] | None = None,
) -> pl.LazyFrame:
    """Rows read, kept and dropped per rule, per security and local date.

    One pass over the rows counts them per security, date, rule (and whether
    a kept row had a quote); the counts are then spread into the rule columns
    on that small table. ``month`` a list of consecutive months (with the
    ``sample``): each security-day's row names its own month partition in
    ``partition`` (a local date lies in one month; a row without one in the
    first month of the sample, as in ``_partition``).
    """
    months = months_of(month)
    lf = flagged.lazy()
    names = lf.collect_schema().names()
    quoted = pl.col("_quoted") if "_quoted" in names else pl.lit(None, dtype=pl.Boolean)
    home = []
    partition = pl.lit(months[0]).alias("partition")
    if len(months) > 1:
        lo, hi = month_number(sample[0]), month_number(sample[1])
        home = [pl.col("_month").fill_null(lo).clip(lo, hi).alias("_home")]
        partition = pl.col("_home").first().replace_strict(
            {month_number(m): m for m in months}, return_dtype=pl.String).alias("partition")
    counts = lf.group_by("security", "date", "drop_rule", quoted.alias("_quoted"), *home).agg(
        pl.len().cast(pl.Int64).alias("_n"))
    n, kept = pl.col("_n"), pl.col("drop_rule").is_null()
    without = n.filter(kept & ~pl.col("_quoted")).sum()
    return (
        counts.group_by("security", "date")
        .agg(
            partition,
            n.sum().alias("rows_read"),
            n.filter(kept).sum().alias("rows_kept"),
            *[n.filter(pl.col("drop_rule") == rule).sum().alias(f"drop_{rule}") for rule in RULES],
            pl.when(pl.col("_quoted").is_null().all()).then(None).otherwise(without).cast(pl.Int64)
            .alias("kept_without_quote"),
        )
        .with_columns(pl.lit(table).alias("table"), pl.lit(timestamps).alias("timestamps"))
        .select("table", "partition", "security", "date", pl.exclude("table", "partition", "security", "date"))
        .sort("table", "security", "date", nulls_last=True)
    )


def kept_rows(flagged: pl.DataFrame | pl.LazyFrame, columns: list[str], *, month_number: bool = False) -> pl.LazyFrame:
    """The kept rows with ``columns`` (those present) and the local ``date``, in the flagged frame's order.

    ``flag_trades`` and ``flag_quotes`` leave their rows in security, time and
    input order, so the clean tables come out in that order without a sort.
    ``month_number``: also the local month number ``_month`` (a kept row's
    month partition, ``month_number``), to cut several months apart.
    """
    lf = flagged.lazy()
    names = lf.collect_schema().names()
    extra = ["_month"] if month_number else []
    return lf.filter(pl.col("drop_rule").is_null()).select(*[c for c in columns if c in names], "date", *extra)


def clean_trades(trades: pl.LazyFrame, market: dict, rules: dict, **partition) -> tuple[pl.LazyFrame, pl.LazyFrame]:
    """Apply the cleaning rules to the trades of one month partition.

    ``partition``: ``month``, ``sample`` and optionally ``quotes``, as for
    ``flag_trades``. ``month`` is 'YYYY-MM' in the market's local time; rows dated before
    ``sample[0]`` are accounted in the first partition and rows after
    ``sample[1]`` in the last, so every row read lands in one partition.
    ``quotes`` are clean quotes of the partition (optional). Rows whose
    values did not parse are dropped under ``unparseable`` here; the clean
    stage raises an error for them instead unless told to drop. Returns
    (clean trades, audit), both lazy.
    """
    flagged = flag_trades(trades, market, rules, **partition)
    extra = [c for c in trades.collect_schema().names() if c not in TRADE_COLUMNS and c not in HELPER_COLUMNS]
    return kept_rows(flagged, TRADE_COLUMNS + extra), audit_of(flagged, "trades", month=partition["month"])


def clean_quotes(
    quotes: pl.LazyFrame, market: dict, rules: dict, *, month: str, sample: tuple[str, str]
) -> tuple[pl.LazyFrame, pl.LazyFrame]:
    """Apply the quote rules to one month partition; returns (clean quotes, audit), lazy."""
    flagged = flag_quotes(quotes, market, rules, month=month, sample=sample)
    return kept_rows(flagged, QUOTE_COLUMNS), audit_of(flagged, "quotes", month=month)


def check_conservation(audit: pl.DataFrame) -> None:
    """kept + dropped = read on every audit row, or raise."""
    dropped = pl.sum_horizontal([pl.col(f"drop_{rule}") for rule in RULES if f"drop_{rule}" in audit.columns])
    bad = audit.filter(pl.col("rows_kept") + dropped != pl.col("rows_read"))
    if bad.height:
        raise AssertionError(f"audit conservation fails on {bad.height} security-days: {bad.head(3)}")
