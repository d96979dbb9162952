"""A user's own daily file: read once, checked row by row, audited, adjusted.

Every row read ends in one place: kept, or dropped by the first rule it
breaks, in this order (``liqpanel.ingest`` reads the values):

- ``unparseable``: a date or number present that does not parse (only with
  ``daily.unparseable: drop``; by default the run stops naming the file, the
  column, the row and the value)
- ``missing_key``: security or date missing
- ``duplicate``: a second row for the same security and date
  (``daily.duplicates``: ``error`` stops the run, the default;
  ``keep_first`` keeps the first row in file order and drops the others;
  ``drop_all`` drops every row of the key)
- ``non_finite``: open, high, low, close or volume is NaN or infinite
- ``no_trade``: the close is missing, the row says only that nothing traded
  that day; it is treated exactly like a day the file omits (common practice)
- ``nonpositive_price``: open, high, low or close <= 0 (common practice)
- ``negative_volume``: volume < 0 (common practice)
- ``bad_range``: high < low, or open or close outside [low, high]; with
  ``daily.bad_range: drop_range`` (the default) the day is kept with its
  open, high and low cleared (counted in ``repaired_range``), with
  ``drop_day`` it is dropped under this rule
- ``outside_sample``: a valid day before the first or after the last month
  of ``sample:`` (the last such day before the sample still gives the
  sample's first return its previous close)
- ``closed_day``: a day its market's trading calendar has closed (a holiday
  or the weekend; only for a market profile with ``calendar`` or
  ``holidays``, ``liqpanel.markets``): not a day of the market

Kept rows whose other numbers (ret, dollar_volume, shares_out, ...) are not
finite keep the row with that value missing, counted in ``repaired_non_finite``.

The audit has one row per security and month (``month`` missing for rows
without a date, security ``(missing)`` without one) with ``rows_read``,
``rows_kept``, ``drop_<rule>`` per rule and the two repair counts;
rows_read = rows_kept + the drops, checked before anything is written.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from datetime import date

import polars as pl

from liqpanel import ingest
from liqpanel.bars import add_returns
from liqpanel.core.contracts import DAILY, check_unique_key, follows_previous, month_of
from liqpanel.core.errors import InputError

RULES = (
    "unparseable", "missing_key", "duplicate", "non_finite", "no_trade", "nonpositive_price", "negative_volume",
    "bad_range", "outside_sample", "closed_day",
)
REPAIRS = ("repaired_range", "repaired_non_finite")
PRICES = ("open", "high", "low", "close")
REQUIRED = ("open", "high", "low", "close", "volume")
OPTIONAL = ("dollar_volume", "n_trades", "ret", "shares_out", "mkt_ret")
SPEC = ingest.Spec("daily file", dates=("date",), numeric=REQUIRED, optional_numeric=OPTIONAL)
MISSING_SECURITY = "(missing)"
PIECE_ROWS = 1_000_000  # rows of a daily file read at a time (``read_daily_pieces``)
# price ratios of common splits (new shares per old share) and reverse splits
SPLIT_RATIOS = (1.5, 2.0, 3.0, 4.0, 5.0, 10.0, 1 / 2, 1 / 3, 1 / 4, 1 / 5, 1 / 10)


ADJUSTED_TWICE = (
    "the daily file has its own return column and `inputs.adjustments` is set, so liqpanel cannot tell whether "
    "those returns are already adjusted; remove the return column from `columns.daily` (returns are then computed "
    "from the closes and adjusted) or remove `inputs.adjustments`"
)


@dataclass
class DailyRead:
    daily: pl.DataFrame
    audit: pl.DataFrame
    splits: pl.DataFrame


def _content_rule(settings: dict) -> tuple[pl.Expr, pl.Expr]:
    """The first content rule a row breaks (null: none) and whether its range is inconsistent."""
    bad_range = (pl.col("high") < pl.col("low")) | pl.any_horizontal(
        [(pl.col(c) < pl.col("low")) | (pl.col(c) > pl.col("high")) for c in ("open", "close")]
    )
    chain = (
        pl.when(pl.col("_nonfinite").is_in(list(REQUIRED))).then(pl.lit("non_finite"))
        .when(pl.col("close").is_null()).then(pl.lit("no_trade"))
        .when(pl.any_horizontal([pl.col(c) <= 0 for c in PRICES])).then(pl.lit("nonpositive_price"))
        .when(pl.col("volume") < 0).then(pl.lit("negative_volume"))
    )
    if settings.get("bad_range", "drop_range") == "drop_day":
        chain = chain.when(bad_range).then(pl.lit("bad_range"))
    return chain.otherwise(pl.lit(None, dtype=pl.String)).alias("_rule"), bad_range.fill_null(False)


@dataclass(frozen=True)
class OpenDays:
    """The open days of the markets with a trading calendar over ``first``..``last``: ``days`` holds
    ``date`` (one market) or ``market``, ``date`` (several, with ``codes``: security -> market); a day of
    the span that is not listed for a row's market is closed. Markets not in ``days`` have no calendar."""

    first: date
    last: date
    days: pl.DataFrame
    codes: pl.DataFrame | None = None

    def closed(self, frame: pl.DataFrame) -> pl.Series:
        """Whether each row of ``frame`` (security, date) falls on a closed day of its market."""
        keys = frame.select("security", "date")
        on = ["date"]
        if self.codes is not None:
            keys = keys.join(self.codes, on="security", how="left", maintain_order="left")
            on = ["market", "date"]
        marked = keys.join(self.days.select(*on).unique().with_columns(pl.lit(True).alias("_open")), on=on,
                           how="left", maintain_order="left")
        calendared = pl.lit(True) if self.codes is None else pl.col("market").is_in(
            self.days.get_column("market").unique().implode())
        inside = pl.col("date").is_between(pl.lit(self.first), pl.lit(self.last))
        return marked.select((calendared & inside & pl.col("_open").is_null()).fill_null(False)).to_series()


def flag_rows(frame: pl.DataFrame, layout: ingest.Layout, files: list[str], settings: dict,
              sample: tuple[str, str], open_days: OpenDays | None = None, *, in_order: bool = False) -> pl.DataFrame:
    """Every row read with ``_rule`` (the first rule it breaks, null when kept) and the repairs applied;
    ``in_order``: the rows ``_live`` are known to be in key order (``in_key_order``), so no key repeats."""
    if settings.get("unparseable", "error") == "error":
        problem = ingest.first_bad(frame, layout, files, fix="; fix the file, or set `daily: unparseable: drop`")
        if problem is not None:
            raise problem
    first, last = (pl.lit(f"{m}-01").str.to_date() for m in sample)
    frame = frame.with_columns(
        pl.when(pl.col("_bad").is_not_null()).then(pl.lit("unparseable"))
        .when(_missing_key()).then(pl.lit("missing_key"))
        .otherwise(pl.lit(None, dtype=pl.String))
        .alias("_rule")
    )  # in file order, as ``ingest.read_frame`` reads it
    if not in_order:
        frame = _duplicates(frame, layout, files, settings.get("duplicates", "error"))
    content, bad_range = _content_rule(settings)
    outside = pl.when((pl.col("date") < first) | (month_of("date") > last)).then(pl.lit("outside_sample"))
    closed = pl.lit(None, dtype=pl.String)
    if open_days is not None:
        frame = frame.with_columns(open_days.closed(frame).alias("_closed"))
        closed = pl.when(pl.col("_closed")).then(pl.lit("closed_day"))
    frame = frame.with_columns(pl.coalesce("_rule", content, outside, closed).alias("_rule"),
                               bad_range.alias("_bad_range"))
    # a valid day outside the sample still gives the first return inside it its previous close
    valid = pl.col("_rule").is_null() | (pl.col("_rule") == "outside_sample")
    kept = pl.col("_rule").is_null()
    clear = valid & pl.col("_bad_range")
    # the three price columns are copied only when a range is to be cleared
    cleared = frame.select(clear.any()).item()
    return frame.with_columns(
        *[pl.when(clear).then(None).otherwise(pl.col(c)).alias(c) for c in ("open", "high", "low") if cleared],
        (kept & pl.col("_bad_range")).alias("_repaired_range"),
        (kept & pl.col("_nonfinite").is_not_null()).alias("_repaired_non_finite"),
        valid.alias("_valid"),
    )


def _missing_key() -> pl.Expr:
    return pl.col("security").is_null() | (pl.col("security") == "") | pl.col("date").is_null()


def _live() -> pl.Expr:
    """A row that parsed and has its key: the rows a repeated key is looked for among."""
    return pl.col("_bad").is_null() & _missing_key().not_()


def _duplicates(frame: pl.DataFrame, layout: ingest.Layout, files: list[str], policy: str) -> pl.DataFrame:
    frame = _copies(frame)
    dupes = frame.filter(pl.col("_copies") > 1)
    if dupes.height and policy == "error":
        first = dupes.sort("_file", "_row").row(0, named=True)
        rows = dupes.filter((pl.col("security") == first["security"]) & (pl.col("date") == first["date"]))
        where = ", ".join(f"{r + 1}" for r in rows["_row"].head(3).to_list())
        raise ingest.error(
            layout,
            f"security {first['security']!r} has {rows.height} rows for {first['date']} (data rows {where}); "
            f"{dupes.filter(pl.col('_nth') == 1).height} keys are repeated in all. Fix the file, or set "
            "`daily: duplicates: keep_first` (keep the first row of each key) or `drop_all` (drop every copy); "
            "either way the drops are counted in the daily audit",
            file=files[first["_file"]], column="date", row=rows["_row"][-1] + 1,
            value=_as_written(files[first["_file"]], layout, rows["_row"][-1], "date"),
        )
    drop = pl.col("_copies") > 1 if policy == "drop_all" else pl.col("_nth") > 1
    return frame.with_columns(
        pl.when(pl.col("_rule").is_null() & drop.fill_null(False)).then(pl.lit("duplicate")).otherwise(pl.col("_rule"))
        .alias("_rule")
    ).drop("_nth", "_copies")


def _as_written(file: str, layout: ingest.Layout, row: int, column: str) -> str:
    """A value as the file writes it (for a message)."""
    value = ingest.collect(ingest.scan_file(file, layout).slice(row, 1).select(column), file).item()
    return str(value)


def _day_key(security: pl.Expr, day: pl.Expr) -> pl.Expr:
    """One integer per (security, date): the security's code and the day number, for fast hashing."""
    code = security.cast(pl.Categorical).to_physical().cast(pl.Int64)
    return code * 2**32 + day.cast(pl.Int32).cast(pl.Int64)


def _copies(frame: pl.DataFrame) -> pl.DataFrame:
    """``_nth`` (1-based position in file order) and ``_copies`` among the live rows of each key."""
    live = pl.col("_rule").is_null()
    rows = frame.filter(live).select("security", "date")
    # a file in key order (the usual vendor file) has no repeated key: one pass proves it, without hashing
    if in_key_order(rows) or not rows.select(_day_key(pl.col("security"), pl.col("date")).is_duplicated().any()).item():
        return frame.with_columns(pl.lit(1, dtype=pl.UInt32).alias("_nth"), pl.lit(1, dtype=pl.UInt32).alias("_copies"))
    key = [pl.col("security"), pl.col("date"), live.alias("_live")]
    return frame.with_columns(
        pl.when(live).then(pl.int_range(1, pl.len() + 1).over(key)).alias("_nth"),
        pl.when(live).then(pl.len().over(key)).alias("_copies"),
    )


def audit_of(flagged: pl.DataFrame) -> pl.DataFrame:
    """Rows read, kept, dropped per rule and repaired, per security-month (``audit_counts`` of the rows)."""
    return audit_from_counts(audit_counts(flagged))


AUDIT_KEY = ("security", "month", "_rule", "_repaired_range", "_repaired_non_finite")


def audit_counts(flagged: pl.DataFrame) -> pl.DataFrame:
    """The rows counted per run of consecutive rows with the same security, month, rule and repairs
    (``_n``): a file in key order has few runs, found in one pass comparing each row with the one before,
    without hashing. Counts of several pieces of a file, stacked, give its audit (``audit_from_counts``)."""
    keys = flagged.select("security", month_of("date").alias("month"), *AUDIT_KEY[2:])
    if not keys.height:
        return keys.with_columns(pl.lit(0, dtype=pl.Int64).alias("_n"))
    changed = pl.any_horizontal([pl.col(c).ne_missing(pl.col(c).shift(1)) for c in AUDIT_KEY]).fill_null(True)
    starts = keys.with_row_index("_start").filter(changed)
    ends = pl.col("_start").shift(-1).fill_null(keys.height)
    return starts.select(*AUDIT_KEY, (ends - pl.col("_start")).cast(pl.Int64).alias("_n"))


def audit_from_counts(counts: pl.DataFrame) -> pl.DataFrame:
    """The audit of ``audit_counts``: the counts spread into the rule columns, per security-month."""
    n = pl.col("_n")
    spread = {
        "rows_read": n, "rows_kept": pl.when(pl.col("_rule").is_null()).then(n).otherwise(0),
        **{f"drop_{rule}": pl.when(pl.col("_rule") == rule).then(n).otherwise(0) for rule in RULES},
        **{repair: pl.when(pl.col(f"_{repair}")).then(n).otherwise(0) for repair in REPAIRS},
    }
    return (
        counts.select(pl.col("security").fill_null(MISSING_SECURITY).replace("", MISSING_SECURITY), "month",
                      *[expr.alias(name) for name, expr in spread.items()])
        .group_by("security", "month")
        .agg(pl.col(*spread).sum())
        .sort("security", "month", nulls_last=True)
    )


def check_balance(audit: pl.DataFrame, path: str) -> None:
    """rows_read = rows_kept + every drop, on every row of the audit."""
    dropped = pl.sum_horizontal([pl.col(f"drop_{r}") for r in RULES])
    off = audit.filter(pl.col("rows_read") != pl.col("rows_kept") + dropped)
    if off.height:
        raise InputError(f"the daily audit does not balance for {off.height} security-months (a defect of liqpanel)",
                         path=path)


def adjust(daily: pl.DataFrame, adjustments: pl.DataFrame | None, has_returns: bool, layout: ingest.Layout,
           ordered: bool | None = None) -> pl.DataFrame:
    """Returns (computed when the file has none) and split-adjusted prices and volume.

    Prices before a split's ex-date are divided by the product of the later
    split ratios of the security and volumes multiplied by it, so a price
    series has no step at the split; the return of the ex-date is
    (close x split + dividend) / previous close - 1, as on the trade path
    (``liqpanel.bars.add_returns``).
    """
    if adjustments is not None and adjustments.height and has_returns:
        raise ingest.error(layout, ADJUSTED_TWICE, column="ret")
    if not (adjustments is not None and adjustments.height) and (in_key_order(daily) if ordered is None else ordered):
        return daily if has_returns else _returns_in_order(daily)
    lf = daily.lazy()
    if not has_returns:
        lf = add_returns(lf, adjustments=adjustments)
    if adjustments is not None and adjustments.height:
        later = (
            lf.select("security", "date")
            .join(adjustments.lazy().select("security", pl.col("date").alias("_ex"), "split_ratio"), on="security")
            .filter(pl.col("_ex") > pl.col("date"))
            .group_by("security", "date")
            .agg(pl.col("split_ratio").product().alias("_factor"))
        )
        factor = pl.col("_factor").fill_null(1.0)
        lf = lf.join(later, on=["security", "date"], how="left").with_columns(
            *[(pl.col(c) / factor).alias(c) for c in PRICES], (pl.col("volume") * factor).alias("volume"),
        ).drop("_factor")
    return lf.sort("security", "date").collect()


def _returns_in_order(daily: pl.DataFrame) -> pl.DataFrame:
    """``liqpanel.bars.add_returns`` of a table in key order (``in_key_order``) without adjustments:
    each row's previous row is its security's previous day, so no sort and no grouping are needed;
    the same expressions, so the same values."""
    new_security = (pl.col("security") != pl.col("security").shift(1)).fill_null(True)
    close_before = pl.when(new_security).then(None).otherwise(pl.col("close").shift(1))
    # the day before lies before the previous calendar month: the first days of the two months are more
    # than 31 days apart (one month apart: 28 to 31 days; two or more: at least 59)
    stale = (pl.col("month").to_physical() - pl.col("month").to_physical().shift(1)) > 31
    return daily.with_columns(pl.when(stale).then(None).otherwise(pl.col("close") / close_before - 1.0).alias("ret"))


def suspected_splits(daily: pl.DataFrame, tolerance: float = 0.03, ordered: bool | None = None) -> pl.DataFrame:
    """Days whose return is close to a split's (-1/2, -2/3, +1, ...) with a matching volume jump.

    A k-for-1 split leaves 1 + ret = 1/k and multiplies volume by about k; a
    day is listed when |(1 + ret) k - 1| <= ``tolerance`` and the volume
    changed by at least sqrt(k) in the split's direction (a threshold of this
    project). Each day is listed once, under the nearest ratio.
    """
    gaps = {k: ((1.0 + pl.col("ret")) * k - 1.0).abs() for k in SPLIT_RATIOS}
    near = pl.any_horizontal([gap <= tolerance for gap in gaps.values()])
    if in_key_order(daily) if ordered is None else ordered:
        # each row's previous row is its security's previous day: the days whose return is near any
        # split's are found in one pass, and only their previous rows are looked up; the pass compares
        # 1 + ret with two bounds every such day passes (a split's up to (1 + tolerance) / k, a reverse
        # split's from (1 - tolerance) / k, widened against rounding) before the gaps are computed
        below, above = float("inf"), float("-inf")  # every day, for a tolerance of 1 or more
        if 0 <= tolerance < 1:
            below = max((1.0 + tolerance) / k for k in SPLIT_RATIOS if k > 1) * (1 + 1e-9)
            above = min((1.0 - tolerance) / k for k in SPLIT_RATIOS if k < 1) * (1 - 1e-9)
        wide = daily.select(pl.arg_where((pl.col("ret") + 1.0 <= below) | (pl.col("ret") + 1.0 >= above))).to_series()
        index = wide.filter(daily.select(pl.col("ret").gather(wide)).select(near.fill_null(False)).to_series())
        before = daily.select("security", "volume").gather((index - 1).clip(lower_bound=0))
        base = daily.gather(index).with_columns(
            pl.when((index > 0) & (before["security"] == pl.col("security")))
            .then(pl.col("volume") / before["volume"]).alias("volume_ratio")
        )
    else:
        base = daily.sort("security", "date").with_columns(
            (pl.col("volume") / pl.col("volume").shift(1).over("security")).alias("volume_ratio")
        ).filter(near)
    candidates = pl.concat([
        base.filter(
            gaps[k] <= tolerance,
            (pl.col("volume_ratio") >= k ** 0.5) if k > 1 else (pl.col("volume_ratio") <= k ** 0.5),
        ).select(
            "security", "date", "ret", "volume_ratio",
            pl.lit(f"{k:g}:1" if k >= 1 else f"1:{1 / k:g}").alias("suspected_split"),
            gaps[k].alias("_gap"),
        )
        for k in SPLIT_RATIOS
    ])
    return candidates.sort("security", "date", "_gap").unique(["security", "date"], keep="first").sort(
        "security", "date").drop("_gap")


def read_daily(layout: ingest.Layout, settings: dict, sample: tuple[str, str],
               adjustments: pl.DataFrame | None = None, open_days: OpenDays | None = None) -> DailyRead:
    """The daily table of a user's file (contract: DEVELOPERS.md), its audit and the suspected splits."""
    frame, files = ingest.read_frame(layout, SPEC)
    if not frame.height:
        raise InputError("the daily file has a header but no data rows", path=files[0])
    problem = ingest.impossible_return(frame, layout, files)
    if problem is not None:
        raise problem
    flagged = flag_rows(frame, layout, files, settings or {}, sample, open_days)
    audit = audit_of(flagged)
    check_balance(audit, layout.path)
    names = set(frame.columns)
    del frame  # its columns live on in ``flagged``; the helpers of the read are left behind with it
    kept = _kept(flagged, names)
    del flagged
    # whether the kept rows are in key order, proved once for the steps that need to know (None: each
    # proves it for itself); the daily table is then a subset of them in the same order
    ordered = None if adjustments is not None and adjustments.height else in_key_order(kept)
    daily = _daily_table(kept, names, sample, adjustments, layout, ordered)
    return DailyRead(daily=daily, audit=audit, splits=suspected_splits(daily, ordered=True if ordered else None))


def _kept(flagged: pl.DataFrame, names: set[str]) -> pl.DataFrame:
    """The valid rows of ``flagged`` (kept, or outside the sample) with the daily table's columns."""
    kept = flagged.lazy()
    if not flagged.get_column("_valid").all():  # a file whose every row is kept is not copied by a filter
        kept = kept.filter(pl.col("_valid"))
    kept = kept.with_columns(month_of("date").alias("month"))
    if "dollar_volume" not in names:
        kept = kept.with_columns((pl.col("close") * pl.col("volume")).alias("dollar_volume"))
    if "n_trades" not in names:
        kept = kept.with_columns(pl.lit(None, dtype=pl.Int64).alias("n_trades"))
    extra = [c for c in ("shares_out", "mkt_ret") if c in names]
    # one query: only the columns kept are copied by the filter
    return kept.select(*[c for c in DAILY if c != "ret" or "ret" in names], *extra).collect()


def _daily_table(kept: pl.DataFrame, names: set[str], sample: tuple[str, str], adjustments: pl.DataFrame | None,
                 layout: ingest.Layout, ordered: bool | None) -> pl.DataFrame:
    """The daily table of the rows ``_kept``: adjusted (``adjust``), inside the sample, in key order."""
    extra = [c for c in ("shares_out", "mkt_ret") if c in names]
    daily = adjust(kept, adjustments, "ret" in names, layout, ordered)
    first, last = (pl.lit(f"{m}-01").str.to_date() for m in sample)
    inside = pl.col("month").is_between(first, last)
    if not daily.select(inside.all()).item():  # a file within the sample is not copied by a filter
        daily = daily.filter(inside)
    daily = daily.select(  # in order: ``adjust`` sorts
        [pl.col(c).cast(t) for c, t in DAILY.items()] + [pl.col(c).cast(pl.Float64) for c in extra]
    )
    if not ordered:
        _check_key(daily)
    return daily


class NotInPieces(Exception):
    """A daily file ``read_daily_pieces`` cannot read in pieces; ``read_daily`` reads it whole."""


def read_daily_pieces(layout: ingest.Layout, settings: dict, sample: tuple[str, str],
                      adjustments: pl.DataFrame | None, open_days: OpenDays | None,
                      take: Callable[[pl.DataFrame], None], rows: int = PIECE_ROWS) -> DailyRead:
    """``read_daily`` of a file in key order, about ``rows`` rows of the file at a time.

    Each piece of the file holds whole securities (their rows that parse and
    have a key: ``_piece_end``), so its returns, adjustments and suspected
    splits are those of the file read whole; ``take`` receives each
    piece's daily table, in key order, one after the other. The audit is
    counted per piece and summed (``audit_counts``). The table returned has
    the audit and the suspected splits, and no daily rows.

    Raises ``NotInPieces`` when the file is several files, its rows are not in
    key order (``in_key_order`` over the pieces), or it stops the run (a value
    that does not parse, an impossible return, a missing rate, ...): read
    whole, it is checked for repeated keys and the error is the same as ever.
    """
    scanned = ingest.scan_frame(layout, SPEC)
    if scanned is None:
        raise NotInPieces("several files")
    query, file = scanned
    settings = settings or {}
    counts: list[pl.DataFrame] = []
    splits: list[pl.DataFrame] = []
    last: tuple | None = None  # the last key of the rows ``_live`` so far
    ordered = None if adjustments is not None and adjustments.height else True

    def piece(frame: pl.DataFrame) -> None:
        nonlocal last
        keys = frame.select("security", "date").filter(_live_in(frame))
        if keys.height:
            first = keys.row(0)
            if not in_key_order(keys) or (last is not None and first <= last):
                raise NotInPieces("rows not in key order")
            last = keys.row(-1)
        problem = ingest.impossible_return(frame, layout, [file])
        if problem is not None:
            raise NotInPieces(str(problem))
        flagged = flag_rows(frame, layout, [file], settings, sample, open_days, in_order=True)
        counts.append(audit_counts(flagged))
        names = set(frame.columns)
        daily = _daily_table(_kept(flagged, names), names, sample, adjustments, layout, ordered)
        del flagged
        splits.append(suspected_splits(daily, ordered=ordered))
        take(daily)

    try:
        rest, read = None, 0
        for batch in query.collect_batches(chunk_size=rows):
            read += batch.height
            rest = batch if rest is None else pl.concat([rest, batch])
            while (cut := _piece_end(rest, rows)) is not None:
                piece(rest.slice(0, cut))
                rest = rest.slice(cut)
        if not read:
            raise NotInPieces("no data rows")
        if rest.height:
            piece(rest)
    except (InputError, pl.exceptions.PolarsError, OSError) as exc:
        raise NotInPieces(str(exc)) from exc
    audit = audit_from_counts(pl.concat(counts))
    check_balance(audit, layout.path)
    return DailyRead(daily=pl.DataFrame(schema=DAILY), audit=audit,
                     splits=pl.concat(splits).sort("security", "date"))


def _piece_end(frame: pl.DataFrame, rows: int) -> int | None:
    """Where the first piece of ``frame`` ends: at the first row ``_live`` from row ``rows`` on that
    begins a security (None: no such row yet). The pieces depend on the file alone, not on how it is read."""
    if frame.height <= rows:
        return None
    live = frame.select(pl.int_range(pl.len(), dtype=pl.UInt32).alias("_i"), "security").filter(_live_in(frame))
    starts = live.filter(pl.col("security").ne_missing(pl.col("security").shift(1)) & (pl.col("_i") >= rows))
    return int(starts.item(0, "_i")) if starts.height else None


def _live_in(frame: pl.DataFrame) -> pl.Series:
    return frame.select(_live()).to_series()


def _check_key(daily: pl.DataFrame) -> None:
    """The key (security, date) is non-missing and unique (``contracts.check_unique_key``).

    The table is in key order, so one pass comparing each row with the one
    before proves it; only a table where that pass fails is checked by hashing.
    """
    if not in_key_order(daily):
        check_unique_key(daily, ("security", "date"), table="daily")


def in_key_order(frame: pl.DataFrame) -> bool:
    """Whether ``frame``'s security and date are never missing and strictly increase row by row
    (sorted by the key, each key once), in one pass comparing each row with the one before."""
    whole = pl.any_horizontal(pl.col("security").is_null(), pl.col("date").is_null()).any().not_()
    return bool(frame.select(whole & follows_previous(["security", "date"]).slice(1).all()).item())


def audit_summary(audit: pl.DataFrame) -> pl.DataFrame:
    """Rows read, kept, dropped per rule and repaired over the whole file, with shares of rows read."""
    totals = audit.select(pl.col("rows_read", "rows_kept", *[f"drop_{r}" for r in RULES], *REPAIRS).sum())
    read = totals.item(0, "rows_read")
    entries = [("read", read), ("kept", totals.item(0, "rows_kept"))]
    entries += [(f"dropped: {r}", totals.item(0, f"drop_{r}")) for r in RULES]
    entries += [(f"kept, {r.replace('repaired_', 'repaired: ')}", totals.item(0, r)) for r in REPAIRS]
    return pl.DataFrame(
        {"rows": [e[0] for e in entries], "count": [int(e[1]) for e in entries],
         "share": [e[1] / read if read else None for e in entries]},
        schema_overrides={"count": pl.Int64},
    )
