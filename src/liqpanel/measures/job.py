"""The measures jobs: monthly measures of a month, a span of months or a daily file's whole sample, and their gathering."""

from __future__ import annotations

import polars as pl

from liqpanel.core.io import write_parquet
from liqpanel.core.settings import InputSettings, MarketSettings, MeasureSettings, SampleSettings
from liqpanel.markets.several import MARKET, calendar_span, load_markets, several


def run_measures(daily_paths: list[str], previous_daily_path: str | None, out_paths: list[str], *,
                 inputs: InputSettings, sample: SampleSettings, market: MarketSettings,
                 measures: MeasureSettings) -> None:
    """``run_measures_month`` for consecutive months; ``previous_daily_path``: the month before the first, or None."""
    for daily_path, out in zip(daily_paths, out_paths, strict=True):
        run_measures_month(daily_path, previous_daily_path, out, inputs=inputs, sample=sample, market=market,
                           measures=measures)
        previous_daily_path = daily_path


# the daily rows measured in one call for a daily file: about 0.1 s of measures and 100 MB at most,
# and the fixed cost of a call (some twenty queries planned and run, 0.015 s) paid once for many months
MEASURES_BLOCK_ROWS = 1_000_000


def measures_block_rows(measures: MeasureSettings) -> int:
    """``block_rows`` of ``run_measures_table`` for a run's measures: ``MEASURES_BLOCK_ROWS`` when each of
    them is a plan of per-month sums that reads nothing beyond its security-month's days (its values
    do not depend on the other months measured with it), else 0 (month by month): the measures
    without a plan (the Gibbs sampler's one random stream for all the months it estimates) and those
    that count the market's days within each security's listed span (``liqpanel.measures.plan``)."""
    from liqpanel.measures import get_measure
    from liqpanel.measures.registry import resolve_options

    for name, options in measures.as_dict().items():
        measure = get_measure(name)
        options = resolve_options(measure, options)
        options.pop("min_days")
        if measure.plan is None or measure.plan(**options).context:
            return 0
    return MEASURES_BLOCK_ROWS


def run_measures_table(daily_paths: list[str], previous_daily_path: str | None, out: str, *, inputs: InputSettings,
                       sample: SampleSettings, market: MarketSettings, measures: MeasureSettings,
                       block_rows: int = MEASURES_BLOCK_ROWS) -> None:
    """The measures of consecutive months in one table (``out``); ``previous_daily_path``: the month before
    the first, or None. Used for a daily file, whose months are small and many.

    Consecutive months of at most ``block_rows`` daily rows together (a larger
    month alone; 0: each month alone) go through the measures in one call, so
    the call's fixed cost is paid once a block instead of once a month; a
    security-month's measures read its own days and its previous month's last
    day only, so the values are those of the month measured alone, and the
    monthly table gathered from these tables is the one gathered from month
    partitions (``run_monthly`` sorts it).
    """
    import pyarrow.parquet as pq

    rows = [pq.read_metadata(p).num_rows for p in daily_paths]
    parts, start = [], 0
    while start < len(daily_paths):
        stop, total = start + 1, rows[start]
        while stop < len(daily_paths) and total + rows[stop] <= block_rows:
            total += rows[stop]
            stop += 1
        if total:
            # each month in (security, date) order: the months one after another, ordered by security
            # alone keeping their order, are in (security, date) order (half the time of that sort)
            block = pl.concat([pl.scan_parquet(p) for p in daily_paths[start:stop]]).sort("security",
                                                                                          maintain_order=True)
            parts.append(_measures(block, previous_daily_path, inputs, sample, market, measures))
        previous_daily_path, start = daily_paths[stop - 1], stop
    if not parts:  # no month with a row: the empty table of one month, as ``run_measures_month`` writes it
        parts.append(_measures(pl.scan_parquet(daily_paths[0]), None, inputs, sample, market, measures))
    write_parquet(pl.concat(parts, how="diagonal_relaxed"), out)


def run_measures_month(daily_path: str, previous_daily_path: str | None, out: str, *, inputs: InputSettings,
                       sample: SampleSettings | None, market: MarketSettings, measures: MeasureSettings) -> None:
    """One month's measures; the previous month's last days ride along, flagged (liqpanel.core.partition)."""
    daily = pl.scan_parquet(daily_path)
    previous = pl.scan_parquet(previous_daily_path) if previous_daily_path else None
    write_parquet(_measures(daily, previous, inputs, sample, market, measures), out)


def _measures(daily: pl.LazyFrame, previous: pl.LazyFrame | str | None, inputs: InputSettings,
              sample: SampleSettings | None, market: MarketSettings, measures: MeasureSettings) -> pl.DataFrame:
    """The measures of the security-months of ``daily`` (one month or several), sorted by security and month."""
    from liqpanel.measures import compute_monthly
    from liqpanel.measures.frames import market_inputs

    if isinstance(previous, str):
        previous = pl.scan_parquet(previous)
    start, end = calendar_span(sample) if sample is not None and sample.start else (None, None)
    selected = measures.as_dict()
    loaded = load_markets(market.as_config(inputs))
    members = loaded["_members"] if several(loaded) else {None: loaded}
    present = set(daily.select(MARKET).unique().collect().to_series().to_list()) if several(loaded) else {None}
    parts = []
    for code, profile in members.items():  # each market on its own: its tick, its market return, its trading days
        if code not in present:
            continue
        mine, before = daily, previous
        if code is not None:
            mine = daily.filter(pl.col(MARKET) == code).drop(MARKET)
            before = previous.filter(pl.col(MARKET) == code).drop(MARKET) if previous is not None else None
        mine, selection, calendar = market_inputs(mine, selected, profile, start, end)
        if before is not None:
            before = market_inputs(before, selected, profile, start, end)[0]
        parts.append(compute_monthly(mine, selection, previous=before, calendar=calendar))
    if not parts:  # a month without any row
        parts.append(compute_monthly(daily.drop(MARKET) if several(loaded) else daily,
                                     market_inputs(daily, selected, None)[1], previous=None))
    return pl.concat(parts, how="diagonal_relaxed").sort("security", "month") if len(parts) > 1 else parts[0]


def run_monthly(paths: list[str], out: str) -> None:
    """The month partitions' measures in one table, with the measures that span twelve months (Liu's LM12)."""
    from liqpanel.measures.frames import with_twelve_month_measures

    frame = pl.concat([pl.scan_parquet(p) for p in paths], how="diagonal_relaxed").sort("security", "month").collect()
    write_parquet(with_twelve_month_measures(frame), out)
