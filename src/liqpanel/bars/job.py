"""The bars jobs: clean trades (and quotes) into daily bars with the high-frequency columns the measures read,
and the span job that cleans a span of months and puts them into bars in one process."""

from __future__ import annotations

from pathlib import Path

import polars as pl

from liqpanel.bars import daily as bars_mod
from liqpanel.clean import reading as readers
from liqpanel.clean.job import by_month, clean_months
from liqpanel.core.errors import InputError
from liqpanel.core.io import write_parquet
from liqpanel.core.partition import first_day
from liqpanel.core.settings import (
    BarSettings, CleanSettings, InputSettings, MarketSettings, MeasureSettings, SampleSettings,
)
from liqpanel.markets.several import run_market


def run_bars_month(
    clean_trades_path: str, out: str, clean_quotes_path: str | None = None, *, inputs: InputSettings | None = None,
    sample: SampleSettings | None = None, market: MarketSettings | None = None, bars: BarSettings | None = None,
    measures: MeasureSettings | None = None,
) -> None:
    """Daily bars of one month; with the run's settings, also the high-frequency columns its measures read."""
    trades = pl.scan_parquet(clean_trades_path)
    if market is None:
        write_parquet(bars_mod.trading_bars(trades), out)
        return
    quotes = pl.scan_parquet(clean_quotes_path) if clean_quotes_path else None
    write_parquet(_bars(trades, quotes, run_market(market, inputs, sample), bars, measures), out)


def _bars(trades: pl.LazyFrame, quotes: pl.LazyFrame | None, market: dict, bars: BarSettings,
          measures: MeasureSettings) -> pl.LazyFrame:
    """The bars of one month's clean trades and quotes, with the high-frequency columns the measures read."""
    columns = bars_mod.needed_columns(measures.as_dict()) if measures.selected else None
    # a clean partition is in security and time order (liqpanel.clean.kept_rows)
    return bars_mod.intraday_bars(trades, quotes, market, bars.as_dict(), columns, in_order=True)


# Rows a span job cleans in one pass at most (trades and quotes, as estimated by ``_rows_per_month``):
# months of a small market are cleaned together, which saves the fixed cost of some eighty small
# queries per month; a large market's months one at a time, so a job's memory stays bounded by the month.
ROWS_PER_PASS = 250_000


def run_bars(
    months: list[str], paths: dict[str, list[str]], *, inputs: InputSettings, sample: SampleSettings,
    market: MarketSettings, clean: CleanSettings, bars: BarSettings, measures: MeasureSettings,
) -> None:
    """Clean and bars of each month of a span, in one process (one cluster job).

    ``paths``: per month, in the order of ``months``, the files ``trades``,
    ``audit``, ``quotes`` (clean) and ``bars``; each month is written as its
    own partition, exactly as ``run_clean`` and ``run_bars_month`` write it.
    Consecutive months of a small market are cleaned and their bars computed
    in one pass (at most ``ROWS_PER_PASS`` rows a pass, by the input's
    average month), then cut into their month partitions.
    """
    try:
        per_month = _rows_per_month(inputs, sample)
    except (pl.exceptions.PolarsError, OSError, InputError):
        per_month = None  # the clean stage names a missing or damaged file when it reads it
    size = max(1, int(ROWS_PER_PASS // per_month)) if per_month else 1
    loaded = run_market(market, inputs, sample)
    for first in range(0, len(months), size):
        block = slice(first, first + size)
        cleaned = clean_months(months[block], paths["trades"][block], paths["audit"][block], paths["quotes"][block],
                               inputs=inputs, sample=sample, market=market, clean=clean, loaded=loaded)
        _bars_months(months[block], paths["bars"][block], cleaned, loaded, bars, measures)


def _bars_months(months: list[str], outs: list[str], cleaned: list, market: dict, bars: BarSettings,
                 measures: MeasureSettings) -> None:
    """The bars of consecutive months cleaned in one pass, written month by month."""
    if len(months) == 1:
        (trades, quotes), = cleaned
        write_parquet(_bars(trades.lazy(), quotes.lazy() if quotes is not None else None, market, bars, measures),
                      outs[0])
        return
    # the months one after another: each security-day's rows are still together and in time order, which is
    # all the bars need (they work per security-day); the bars are cut into their months again
    trades = pl.concat([t for t, _ in cleaned])
    quotes = pl.concat([q for _, q in cleaned]) if cleaned[0][1] is not None else None
    frame = _bars(trades.lazy(), quotes.lazy() if quotes is not None else None, market, bars, measures).collect(
        engine="in-memory")
    for part, out in zip(by_month(frame, "month", [first_day(m) for m in months], keep=True), outs, strict=True):
        write_parquet(part, out)


def _rows_per_month(inputs: InputSettings, sample: SampleSettings, counted: int = 20) -> float | None:
    """The trade and quote rows of an average month of the sample, estimated: Parquet files by the row
    counts in their metadata (of the first ``counted`` files, scaled by size to the rest of a glob), other
    files by their size at 40 bytes a row (8 compressed); None without a file to count."""
    from liqpanel.core.io import month_range

    rows = 0.0
    for key in ("trades", "quotes"):
        path = inputs.path(key)
        if not path:
            continue
        files = readers.list_files(path)
        parquet = [f for f in files if str(f).lower().endswith(".parquet")]
        if parquet:
            sizes = [Path(f).stat().st_size for f in parquet]
            first_rows = sum(pl.scan_parquet(f).select(pl.len()).collect().item() for f in parquet[:counted])
            rows += first_rows * sum(sizes) / max(sum(sizes[:counted]), 1)
        for file in (f for f in files if f not in parquet):
            compressed = str(file).lower().endswith((".gz", ".zst", ".bz2", ".xz"))
            rows += Path(file).stat().st_size / (8 if compressed else 40)
    months = len(month_range(sample.start, sample.end))
    return rows / months if rows else None
