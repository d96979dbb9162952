"""The daily jobs: daily bars from intraday bars, or a user's daily file read, checked and cut into months."""

from __future__ import annotations

import sys
from collections.abc import Callable
from concurrent.futures import Future, ThreadPoolExecutor
from contextlib import ExitStack, closing
from typing import TYPE_CHECKING

import polars as pl

from liqpanel import ingest
from liqpanel.bars import daily as bars_mod
from liqpanel.clean.job import read_adjustments
from liqpanel.config import shares_source
from liqpanel.core.io import atomic_path, write_parquet
from liqpanel.core.partition import first_day
from liqpanel.core.settings import DailySettings, InputSettings, MarketSettings, SampleSettings
from liqpanel.markets.several import MARKET, calendar_span, daily_to_reporting, load_markets, several

if TYPE_CHECKING:
    from liqpanel.bars import daily_file as dailyfile


def run_daily_month(bars_path: str, previous_bars_path: str | None, out: str, *, inputs: InputSettings | None = None,
                    market: MarketSettings | None = None) -> None:
    """One month's daily table: returns across the month end, the adjustments, shares outstanding and, with
    several markets, amounts in the reporting currency (without settings: the returns alone)."""
    previous = pl.scan_parquet(previous_bars_path) if previous_bars_path else None
    adjustments = read_adjustments(inputs) if inputs is not None else None
    daily = bars_mod.add_returns(pl.scan_parquet(bars_path), previous, adjustments)
    entry = shares_source(inputs.as_config()) if inputs is not None else None
    if entry is not None:
        daily = _with_shares_out(daily, entry)
    if market is not None and market.markets:
        config = market.as_config(inputs)
        daily = daily_to_reporting(daily, config, load_markets(config))
    write_parquet(daily, out)


def _with_shares_out(daily: pl.LazyFrame, entry: dict) -> pl.LazyFrame:
    """Each day's shares outstanding: the entry's latest value public in the day's month (its ``lag_months``)."""
    from liqpanel.panel import asof_characteristics, read_characteristics

    source = read_characteristics(entry).lazy()
    return asof_characteristics(
        daily, source, variables=["shares_out"], lag_months=entry.get("lag_months", 0),
        date_column=entry.get("date_column", "date"),
    ).sort("security", "date")


def run_daily(bars_paths: list[str], previous_bars_path: str | None, out_paths: list[str], *, inputs: InputSettings,
              market: MarketSettings) -> None:
    """``run_daily_month`` for consecutive months; ``previous_bars_path``: the month before the first, or None."""
    for bars_path, out in zip(bars_paths, out_paths, strict=True):
        run_daily_month(bars_path, previous_bars_path, out, inputs=inputs, market=market)
        previous_bars_path = bars_path


def read_daily_file(path: str, mapping: dict[str, str], *, inputs: InputSettings | None = None,
                    sample: SampleSettings | None = None, market: MarketSettings | None = None,
                    daily: DailySettings | None = None) -> pl.LazyFrame:
    """A user's daily file in the daily contract (see DEVELOPERS.md), checked by ``liqpanel.bars.daily_file``.

    Needs security, date, open, high, low, close and volume; ``dollar_volume``
    defaults to close x volume, ``n_trades`` to missing, and ``ret`` to the
    close-to-close return (only when the file has no return column: a
    vendor's adjusted return is always preferred). ``shares_out`` is kept
    when present. Without the run's settings the whole file is the sample.
    """
    return _read_daily(inputs, sample, market, daily, path, mapping).daily.lazy()


def _read_daily(inputs: InputSettings | None, sample: SampleSettings | None, market: MarketSettings | None,
                daily: DailySettings | None, path: str | None = None, mapping: dict | None = None,
                take: "Callable[[pl.DataFrame], None] | None" = None) -> "dailyfile.DailyRead":
    """The daily file read whole, or with ``take`` in pieces (``dailyfile.read_daily_pieces``)."""
    from liqpanel.bars import daily_file as dailyfile

    config = inputs.as_config() if inputs is not None else {}
    layout = ingest.layout_of(config, "daily") if path is None else ingest.layout_from(
        "daily", path, mapping, (config.get("formats") or {}).get("daily"))
    span = (sample.start, sample.end) if sample is not None else ("0001-01", "9999-12")
    adjustments = read_adjustments(inputs) if inputs is not None else None
    settings = daily.as_dict() if daily is not None else {}
    if take is not None:
        return dailyfile.read_daily_pieces(layout, settings, span, adjustments, _open_days(inputs, sample, market),
                                           take)
    return dailyfile.read_daily(layout, settings, span, adjustments, _open_days(inputs, sample, market))


def _open_days(inputs: InputSettings | None, sample: SampleSettings | None,
               market: MarketSettings | None) -> "dailyfile.OpenDays | None":
    """The open days of the run's markets that have a trading calendar, over the sample (None: none has one)."""
    from liqpanel.bars.daily_file import OpenDays
    from liqpanel.markets import has_calendar, trading_days

    if sample is None or market is None or not (market.market or market.markets):
        return None
    loaded = load_markets(market.as_config(inputs))
    first, last = calendar_span(sample)
    members = loaded["_members"] if several(loaded) else {None: loaded}
    frames = [trading_days(profile, first, last).select("date").with_columns(pl.lit(code).alias(MARKET))
              for code, profile in members.items() if has_calendar(profile)]
    if not frames:
        return None
    days = pl.concat(frames)
    return OpenDays(first, last, days if several(loaded) else days.drop(MARKET), loaded.get("_codes"))


def _write_months(daily: pl.DataFrame, months: list[str], outs: list[str]) -> None:
    """The month partitions of a whole daily table, in its (security, date) order."""
    # one pass finds each month's rows; a month is copied out only as it is written (not the whole table
    # at once), and a month partition is only read whole by the next stages (lz4, no statistics: half the
    # time to write)
    rows = daily.select(pl.int_range(pl.len(), dtype=pl.UInt32).alias("_row"), "month").group_by(
        "month", maintain_order=True).agg("_row")
    rows = dict(zip(rows.get_column("month").to_list(), rows.get_column("_row")))

    def write(month: str, out: str) -> None:
        mine = rows.get(first_day(month))
        write_parquet(daily.clear() if mine is None else daily[mine], out, passing=True)

    with ThreadPoolExecutor(2) as pool:  # the writer releases the interpreter's lock
        list(pool.map(write, months, outs))


class _MonthWriters:
    """Month partitions written a piece at a time: each piece of a daily table in key order (one after
    another) adds a row group to the partition of each of its months; a month without rows is written
    empty at the end. Inside ``with``: a partition is moved into place only when every piece is written
    (``atomic_path``). A piece is written by a thread of its own while the next one is read (the writer
    releases the interpreter's lock), one piece at a time."""

    def __init__(self, months: list[str], outs: list[str]) -> None:
        self.outs = {first_day(m): out for m, out in zip(months, outs, strict=True)}
        self.writers: dict = {}
        self.schema = None
        self.stack = ExitStack()
        self.pending: Future | None = None

    def __enter__(self) -> "_MonthWriters":
        self.stack.__enter__()
        self.thread = self.stack.enter_context(ThreadPoolExecutor(1))
        return self

    def add(self, piece: pl.DataFrame) -> None:
        self._wait()
        self.schema = piece.schema
        self.pending = self.thread.submit(self._write, piece)

    def _wait(self) -> None:
        if self.pending is not None:
            pending, self.pending = self.pending, None
            pending.result()

    def _write(self, piece: pl.DataFrame) -> None:
        import pyarrow.parquet as pq

        for (month,), rows in piece.partition_by("month", as_dict=True, maintain_order=True).items():
            table = rows.to_arrow(compat_level=pl.CompatLevel.newest())
            if month not in self.writers:
                tmp = self.stack.enter_context(atomic_path(self.outs[month]))
                # as ``write_parquet(..., passing=True)`` writes (read whole by the next stages only); no
                # dictionaries, which prices and volumes do not repeat enough to pay for
                writer = pq.ParquetWriter(tmp, table.schema, compression="lz4", write_statistics=False,
                                          use_dictionary=False)
                self.writers[month] = self.stack.enter_context(closing(writer))
            self.writers[month].write_table(table)

    def __exit__(self, *failed) -> None:
        try:
            self._wait()
            if failed[0] is None:
                for month, out in self.outs.items():
                    if month not in self.writers:
                        write_parquet(pl.DataFrame(schema=self.schema), out, passing=True)
        except BaseException:
            self.stack.__exit__(*sys.exc_info())  # the partitions begun are removed
            raise
        self.stack.__exit__(*failed)


def run_daily_file(months: list[str], outs: list[str], out_audit: str, out_splits: str, *, inputs: InputSettings,
                   sample: SampleSettings, market: MarketSettings, daily: DailySettings) -> None:
    """The daily entry point: a user's own daily file read and checked once, written as month
    partitions (``outs``, one per month of ``months``), the daily audit and the suspected splits."""
    from liqpanel.bars.daily_file import NotInPieces

    config = market.as_config(inputs)
    loaded = load_markets(config) if market.markets else None

    def reporting(table: pl.DataFrame) -> pl.DataFrame:
        return table if loaded is None else daily_to_reporting(table.lazy(), config, loaded).collect()

    try:
        # a file in key order is read a piece at a time, each piece's months added to their partitions:
        # the job never holds the whole file
        with _MonthWriters(months, outs) as writers:
            read = _read_daily(inputs, sample, market, daily, take=lambda piece: writers.add(reporting(piece)))
    except NotInPieces:
        read = _read_daily(inputs, sample, market, daily)
        _write_months(reporting(read.daily), months, outs)
    write_parquet(read.audit, out_audit)
    splits = read.splits if daily.split_check is not False else read.splits.clear()
    write_parquet(splits, out_splits)
    if splits.height:
        days = "; ".join(f"{s} {d} ({k}, return {r:.1%})" for s, d, r, _, k in splits.head(5).iter_rows())
        more = f" and {splits.height - 5} more" if splits.height > 5 else ""
        many = splits.height > 1
        print(f"liqpanel: warning: {splits.height} day{'s' if many else ''} of the daily file "
              f"{'look like splits' if many else 'looks like a split'} the prices were not "
              f"adjusted for: {days}{more}; give them in `inputs.adjustments` (listed in the table "
              "daily_suspected_splits)", file=sys.stderr)
