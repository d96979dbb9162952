"""File-level entry points of the workflow: one function per rule.

Each function reads its input files, calls the stage's logic and writes its
outputs atomically. The Snakemake rules in ``liqpanel/workflow/rules/`` call these and
nothing else, so every stage can be run and tested without Snakemake.
"""

from __future__ import annotations

import json
import sys
from concurrent.futures import ThreadPoolExecutor
from datetime import date
from pathlib import Path
from typing import TYPE_CHECKING

import polars as pl

from liqpanel import bars as bars_mod
from liqpanel import readers
from liqpanel.clean import (
    QUOTE_COLUMNS, TRADE_COLUMNS, audit_of, check_conservation, flag_quotes, flag_trades, kept_rows, month_number,
)
from liqpanel.config import shares_source
from liqpanel.marketset import MARKET, attach, daily_to_reporting, load_markets, several
from liqpanel.errors import InputError
from liqpanel import ingest
from liqpanel.io import write_parquet, write_text
from liqpanel.partition import stored_window

if TYPE_CHECKING:
    from liqpanel.report import RunFolder

# A job imports only what its stage uses: the measures (and the Gibbs
# sampler's scipy), the panel, the report and the replication files are
# imported inside the functions that need them, so a clean or bars job
# starts without them (``python -X importtime -c "import liqpanel.stages"``).


def _month_start(month: str) -> date:
    """'YYYY-MM' as the first day of the month, the value of a table's ``month`` column."""
    return date.fromisoformat(f"{month}-01")


def check_inputs(config: dict) -> None:
    """What the pre-flight check (``liqpanel.preflight``) leaves to the readers, before any job runs:
    the trade and quote files' columns and types through their reader, a trade file with no data
    rows, the adjustments file read whole, and a daily file with its own returns beside adjustments.

    Raises ConfigError or InputError naming the profile, file or column;
    row-level problems are found later, by the clean stage and the daily file's job.
    """
    market = load_markets(config)
    inputs, columns = config["inputs"], config.get("columns", {})
    for key, spec in (("trades", readers.TRADES_SPEC), ("quotes", readers.QUOTES_SPEC)):
        if inputs.get(key):
            read = readers.read_table(inputs[key], columns.get(key, {}), spec, market["timezone"],
                                      fmt=(config.get("formats") or {}).get(key))
            if key == "trades" and not ingest.collect(read.frame.select("_row").head(1), inputs[key]).height:
                raise InputError("the trade file has a header but no data rows; nothing can be measured",
                                 path=inputs[key])
    if inputs.get("adjustments"):
        _adjustments(config)
    if inputs.get("daily") and inputs.get("adjustments"):
        from liqpanel import dailyfile

        layout = ingest.layout_of(config, "daily")
        file = ingest.list_files(layout.path)[0]
        if "ret" in ingest.schema_of(ingest.scan_file(file, layout, 1), file):
            raise ingest.error(layout, dailyfile.ADJUSTED_TWICE, file=file, column="ret")


def clean_month(
    config: dict, month: str, out_trades: str, out_audit: str, out_quotes: str | None = None
) -> tuple[pl.DataFrame, pl.DataFrame | None]:
    """Clean one month partition of the trades (and quotes, when the config names them).

    Returns the clean trades and quotes as written (quotes None when no
    ``out_quotes`` is given), so that the bars of the month need not read
    them back. A file the engine
    cannot read to the end (a corrupt Parquet page, a truncated gzip) stops
    the run naming that file.
    """
    try:
        return _clean_month(config, month, out_trades, out_audit, out_quotes)
    except (pl.exceptions.PolarsError, OSError) as exc:
        raise ingest.damaged([config["inputs"][k] for k in ("quotes", "trades") if config["inputs"].get(k)],
                             config.get("formats") or {}, exc) from None


def _clean_month(
    config: dict, month: str, out_trades: str, out_audit: str, out_quotes: str | None = None
) -> tuple[pl.DataFrame, pl.DataFrame | None]:
    (kept, quotes), = _clean_months(config, [month], [out_trades], [out_audit], [out_quotes])
    return kept, quotes


def _clean_months(
    config: dict, months: list[str], out_trades: list[str], out_audit: list[str], out_quotes: list[str | None]
) -> list[tuple[pl.DataFrame, pl.DataFrame | None]]:
    """Clean consecutive months in one pass: their rows read, ordered and flagged as one frame, then
    cut into month partitions, each written as ``clean_month`` writes it alone (every rule works within
    a security and timestamp or a security-day). Returns each month's clean trades and quotes."""
    market = _market(config)
    rules = config["clean"]
    sample = (config["sample"]["start"], config["sample"]["end"])
    columns, formats = config.get("columns", {}), config.get("formats") or {}
    audits, quotes, tz = [], None, market["timezone"]
    several_months = len(months) > 1
    month = months if several_months else months[0]

    # several markets: each row's month is that of its own market's clock
    zones = tuple(sorted({p["timezone"] for p in market["_members"].values()})) if several(market) else ()

    def window(schema: pl.Schema) -> pl.Expr | None:  # only these months' rows leave the file
        conditions = [stored_window(schema, m, sample, tz, zones) for m in months]
        return None if any(c is None for c in conditions) else pl.any_horizontal(conditions) if several_months \
            else conditions[0]

    if config["inputs"].get("quotes"):
        read = readers.read_table(config["inputs"]["quotes"], columns.get("quotes", {}), readers.QUOTES_SPEC, tz, window,
                                  fmt=formats.get("quotes"))
        flagged = flag_quotes(_with_market(read, "quotes", config, market), market, rules, month=month,
                              sample=sample).collect()
        _stop_on_unparseable(flagged, read, "quotes", rules, columns.get("quotes"))
        quotes = kept_rows(flagged, QUOTE_COLUMNS, month_number=several_months).collect()
        audits.append(audit_of(flagged, "quotes", month=month, timestamps=read.describe_timestamps(), sample=sample))
    read = readers.read_table(config["inputs"]["trades"], columns.get("trades", {}), readers.TRADES_SPEC, tz, window,
                              fmt=formats.get("trades"))
    matched = quotes.lazy().drop("_month", strict=False) if quotes is not None else None
    flagged = flag_trades(_with_market(read, "trades", config, market), market, rules, month=month, sample=sample,
                          quotes=matched)
    _stop_on_unparseable(flagged, read, "trades", rules, columns.get("trades"))
    kept = kept_rows(flagged, TRADE_COLUMNS, month_number=several_months).collect()
    audits.append(audit_of(flagged, "trades", month=month, timestamps=read.describe_timestamps(), sample=sample))
    audit = pl.concat(pl.collect_all(audits), how="diagonal_relaxed").sort("table", "security", "date", nulls_last=True)
    check_conservation(audit)
    numbers = [month_number(m) for m in months]
    if quotes is None:
        quotes = [pl.DataFrame(schema={"security": pl.String, "ts": pl.Datetime("us", "UTC"), "bid": pl.Float64,
                                       "ask": pl.Float64, "date": pl.Date})] * len(months)
    else:
        quotes = _by_month(quotes, "_month", numbers) if several_months else [quotes]
    if several_months:  # each month's rows, in the frame's order
        kept, audit = _by_month(kept, "_month", numbers), _by_month(audit, "partition", months, keep=True)
    else:
        kept, audit = [kept], [audit]
    for i in range(len(months)):
        write_parquet(kept[i], out_trades[i], passing=True)
        write_parquet(audit[i], out_audit[i])
        if out_quotes[i]:
            write_parquet(quotes[i], out_quotes[i], passing=True)
    has_quotes = bool(config["inputs"].get("quotes")) or any(out_quotes)
    return [(kept[i], quotes[i] if has_quotes else None) for i in range(len(months))]


def _by_month(frame: pl.DataFrame, column: str, keys: list, *, keep: bool = False) -> list[pl.DataFrame]:
    """``frame`` cut on ``column`` into one frame per key of ``keys`` (empty where none), rows in order;
    ``column`` is dropped unless ``keep``."""
    parts = frame.partition_by(column, as_dict=True, maintain_order=True, include_key=keep)
    empty = frame.clear() if keep else frame.clear().drop(column)
    return [parts.get((key,), empty) for key in keys]


def _with_market(read, key: str, config: dict, market: dict) -> pl.LazyFrame:
    """The rows read with each security's market code (several markets); an unknown security names its row."""
    return attach(read.frame, market, layout=ingest.layout_of(config, key))


def _stop_on_unparseable(flagged: pl.DataFrame, read, table: str, rules: dict, mapping: dict | None = None) -> None:
    if rules.get("unparseable", "error") == "error":
        error = readers.unparseable_error(flagged, read.files, table, mapping=mapping)
        if error is not None:
            raise error


def bars_month(clean_trades_path: str, out: str, config: dict | None = None, clean_quotes_path: str | None = None) -> None:
    """Daily bars of one month; with a config, also the high-frequency columns its measures read."""
    trades = pl.scan_parquet(clean_trades_path)
    if config is None:
        write_parquet(bars_mod.trading_bars(trades), out)
        return
    quotes = pl.scan_parquet(clean_quotes_path) if clean_quotes_path else None
    write_parquet(_bars(config, trades, quotes), out)


def _bars(config: dict, trades: pl.LazyFrame, quotes: pl.LazyFrame | None) -> pl.LazyFrame:
    """The bars of one month's clean trades and quotes, with the high-frequency columns the measures read."""
    market = _market(config)
    columns = bars_mod.needed_columns(config["measures"]) if config.get("measures") else None
    # a clean partition is in security and time order (liqpanel.clean.kept_rows)
    return bars_mod.intraday_bars(trades, quotes, market, config.get("bars"), columns, in_order=True)


def daily_month(bars_path: str, previous_bars_path: str | None, out: str, config: dict | None = None) -> None:
    previous = pl.scan_parquet(previous_bars_path) if previous_bars_path else None
    adjustments = _adjustments(config) if config is not None else None
    daily = bars_mod.add_returns(pl.scan_parquet(bars_path), previous, adjustments)
    entry = shares_source(config) if config is not None else None
    if entry is not None:
        daily = _with_shares_out(daily, entry)
    if config is not None and config.get("markets"):
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


# Rows a span job cleans in one pass at most (trades and quotes, as estimated by ``_rows_per_month``):
# months of a small market are cleaned together, which saves the fixed cost of some eighty small
# queries per month; a large market's months one at a time, so a job's memory stays bounded by the month.
ROWS_PER_PASS = 250_000


def trades_span(config: dict, months: list[str], paths: dict[str, list[str]]) -> None:
    """Clean and bars of each month of a span, in one process (one cluster job).

    ``paths``: per month, in the order of ``months``, the files ``trades``,
    ``audit``, ``quotes`` (clean) and ``bars``; each month is written as its
    own partition, exactly as ``clean_month`` and ``bars_month`` write it.
    Consecutive months of a small market are cleaned and their bars computed
    in one pass (at most ``ROWS_PER_PASS`` rows a pass, by the input's
    average month), then cut into their month partitions.
    """
    try:
        per_month = _rows_per_month(config)
    except (pl.exceptions.PolarsError, OSError, InputError):
        per_month = None  # the clean stage names a missing or damaged file when it reads it
    size = max(1, int(ROWS_PER_PASS // per_month)) if per_month else 1
    for first in range(0, len(months), size):
        block = slice(first, first + size)
        _trades_months(config, months[block], {k: v[block] for k, v in paths.items()})


def _trades_months(config: dict, months: list[str], paths: dict[str, list[str]]) -> None:
    """Clean and bars of consecutive months in one pass, written month by month."""
    try:
        cleaned = _clean_months(config, months, paths["trades"], paths["audit"], paths["quotes"])
    except (pl.exceptions.PolarsError, OSError) as exc:
        raise ingest.damaged([config["inputs"][k] for k in ("quotes", "trades") if config["inputs"].get(k)],
                             config.get("formats") or {}, exc) from None
    if len(months) == 1:
        (trades, quotes), = cleaned
        write_parquet(_bars(config, trades.lazy(), quotes.lazy() if quotes is not None else None), paths["bars"][0])
        return
    # the months one after another: each security-day's rows are still together and in time order, which is
    # all the bars need (they work per security-day); the bars are cut into their months again
    trades = pl.concat([t for t, _ in cleaned])
    quotes = pl.concat([q for _, q in cleaned]) if cleaned[0][1] is not None else None
    bars = _bars(config, trades.lazy(), quotes.lazy() if quotes is not None else None).collect(engine="in-memory")
    for part, out in zip(_by_month(bars, "month", [_month_start(m) for m in months], keep=True), paths["bars"], strict=True):
        write_parquet(part, out)


def _rows_per_month(config: dict, counted: int = 20) -> float | None:
    """The trade and quote rows of an average month of the sample, estimated: Parquet files by the row
    counts in their metadata (of the first ``counted`` files, scaled by size to the rest of a glob), other
    files by their size at 40 bytes a row (8 compressed); None without a file to count."""
    from liqpanel.io import month_range

    rows = 0.0
    for key in ("trades", "quotes"):
        path = config["inputs"].get(key)
        if not path:
            continue
        files = readers.list_files(path)
        parquet = [f for f in files if str(f).lower().endswith(".parquet")]
        if parquet:
            sizes = [Path(f).stat().st_size for f in parquet]
            sample = sum(pl.scan_parquet(f).select(pl.len()).collect().item() for f in parquet[:counted])
            rows += sample * sum(sizes) / max(sum(sizes[:counted]), 1)
        for file in (f for f in files if f not in parquet):
            compressed = str(file).lower().endswith((".gz", ".zst", ".bz2", ".xz"))
            rows += Path(file).stat().st_size / (8 if compressed else 40)
    months = len(month_range(config["sample"]["start"], config["sample"]["end"]))
    return rows / months if rows else None


def daily_span(config: dict, bars_paths: list[str], previous_bars_path: str | None, out_paths: list[str]) -> None:
    """``daily_month`` for consecutive months; ``previous_bars_path``: the month before the first, or None."""
    for bars_path, out in zip(bars_paths, out_paths, strict=True):
        daily_month(bars_path, previous_bars_path, out, config)
        previous_bars_path = bars_path


def measures_span(config: dict, daily_paths: list[str], previous_daily_path: str | None, out_paths: list[str]) -> None:
    """``measures_month`` for consecutive months; ``previous_daily_path``: the month before the first, or None."""
    for daily_path, out in zip(daily_paths, out_paths, strict=True):
        measures_month(config, daily_path, previous_daily_path, out)
        previous_daily_path = daily_path


# the daily rows measured in one call for a daily file: about 0.1 s of measures and 100 MB at most,
# and the fixed cost of a call (some twenty queries planned and run, 0.015 s) paid once for many months
MEASURES_BLOCK_ROWS = 1_000_000


def measures_block_rows(config: dict) -> int:
    """``block_rows`` of ``measures_table`` for a run's measures: ``MEASURES_BLOCK_ROWS`` when each of
    them is a plan of per-month sums that reads nothing beyond its security-month's days (its values
    do not depend on the other months measured with it), else 0 (month by month): the measures
    without a plan (the Gibbs sampler's one random stream for all the months it estimates) and those
    that count the market's days within each security's listed span (``liqpanel.measures.plan``)."""
    from liqpanel.measures import get_measure
    from liqpanel.measures.registry import resolve_options

    for name, options in config["measures"].items():
        measure = get_measure(name)
        options = resolve_options(measure, options)
        options.pop("min_days")
        if measure.plan is None or measure.plan(**options).context:
            return 0
    return MEASURES_BLOCK_ROWS


def measures_table(config: dict, daily_paths: list[str], previous_daily_path: str | None, out: str,
                   block_rows: int = MEASURES_BLOCK_ROWS) -> None:
    """The measures of consecutive months in one table (``out``); ``previous_daily_path``: the month before
    the first, or None. Used for a daily file, whose months are small and many.

    Consecutive months of at most ``block_rows`` daily rows together (a larger
    month alone; 0: each month alone) go through the measures in one call, so
    the call's fixed cost is paid once a block instead of once a month; a
    security-month's measures read its own days and its previous month's last
    day only, so the values are those of the month measured alone, and the
    monthly table gathered from these tables is the one gathered from month
    partitions (``gather_monthly`` sorts it).
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
            parts.append(_measures(config, pl.concat([pl.scan_parquet(p) for p in daily_paths[start:stop]]),
                                   previous_daily_path))
        previous_daily_path, start = daily_paths[stop - 1], stop
    if not parts:  # no month with a row: the empty table of one month, as ``measures_month`` writes it
        parts.append(_measures(config, pl.scan_parquet(daily_paths[0]), None))
    write_parquet(pl.concat(parts, how="diagonal_relaxed"), out)


def read_daily_file(path: str, mapping: dict[str, str], config: dict | None = None) -> pl.LazyFrame:
    """A user's daily file in the daily contract (see DEVELOPERS.md), checked by ``liqpanel.dailyfile``.

    Needs security, date, open, high, low, close and volume; ``dollar_volume``
    defaults to close x volume, ``n_trades`` to missing, and ``ret`` to the
    close-to-close return (only when the file has no return column: a
    vendor's adjusted return is always preferred). ``shares_out`` is kept
    when present. Without a config the whole file is the sample.
    """
    return _read_daily(config or {}, path, mapping).daily.lazy()


def _read_daily(config: dict, path: str | None = None, mapping: dict | None = None) -> "dailyfile.DailyRead":
    from liqpanel import dailyfile

    layout = ingest.layout_of(config, "daily") if path is None else ingest.layout_from(
        "daily", path, mapping, (config.get("formats") or {}).get("daily"))
    sample = (config["sample"]["start"], config["sample"]["end"]) if "sample" in config else ("0001-01", "9999-12")
    adjustments = _adjustments(config) if config.get("inputs") else None
    return dailyfile.read_daily(layout, config.get("daily", {}), sample, adjustments, _open_days(config))


def _open_days(config: dict) -> "dailyfile.OpenDays | None":
    """The open days of the run's markets that have a trading calendar, over the sample (None: none has one)."""
    from liqpanel.dailyfile import OpenDays
    from liqpanel.markets import has_calendar, trading_days

    if "sample" not in config or not (config.get("market") or config.get("markets")):
        return None
    market = load_markets(config)
    first, last = _calendar_span(config)
    members = market["_members"] if several(market) else {None: market}
    frames = [trading_days(profile, first, last).select("date").with_columns(pl.lit(code).alias(MARKET))
              for code, profile in members.items() if has_calendar(profile)]
    if not frames:
        return None
    days = pl.concat(frames)
    return OpenDays(first, last, days if several(market) else days.drop(MARKET), market.get("_codes"))


def _adjustments(config: dict) -> pl.DataFrame | None:
    if not config["inputs"].get("adjustments"):
        return None
    return readers.read_adjustments(
        config["inputs"]["adjustments"], config["columns"].get("adjustments", {}),
        (config.get("formats") or {}).get("adjustments"),
    )


def daily_from_file(config: dict, months: list[str], outs: list[str], out_audit: str, out_splits: str) -> None:
    """The daily entry point: a user's own daily file read and checked once, written as month
    partitions (``outs``, one per month of ``months``), the daily audit and the suspected splits."""
    read = _read_daily(config)
    daily = daily_to_reporting(read.daily.lazy(), config, load_markets(config)).collect() if config.get(
        "markets") else read.daily
    # one pass finds each month's rows, in the table's (security, date) order; a month is copied out
    # only as it is written (not the whole table at once), and a month partition is only read whole
    # by the next stages (lz4, no statistics: half the time to write)
    rows = daily.select(pl.int_range(pl.len(), dtype=pl.UInt32).alias("_row"), "month").group_by(
        "month", maintain_order=True).agg("_row")
    rows = dict(zip(rows.get_column("month").to_list(), rows.get_column("_row")))

    def write(month: str, out: str) -> None:
        mine = rows.get(_month_start(month))
        write_parquet(daily.clear() if mine is None else daily[mine], out, passing=True)

    with ThreadPoolExecutor(2) as pool:  # the writer releases the interpreter's lock
        list(pool.map(write, months, outs))
    write_parquet(read.audit, out_audit)
    splits = read.splits if config.get("daily", {}).get("split_check", True) else read.splits.clear()
    write_parquet(splits, out_splits)
    if splits.height:
        days = "; ".join(f"{s} {d} ({k}, return {r:.1%})" for s, d, r, _, k in splits.head(5).iter_rows())
        more = f" and {splits.height - 5} more" if splits.height > 5 else ""
        many = splits.height > 1
        print(f"liqpanel: warning: {splits.height} day{'s' if many else ''} of the daily file "
              f"{'look like splits' if many else 'looks like a split'} the prices were not "
              f"adjusted for: {days}{more}; give them in `inputs.adjustments` (listed in the table "
              "daily_suspected_splits)", file=sys.stderr)


def measures_month(config: dict, daily_path: str, previous_daily_path: str | None, out: str) -> None:
    """One month's measures; the previous month's last days ride along, flagged (liqpanel.partition)."""
    daily = pl.scan_parquet(daily_path)
    previous = pl.scan_parquet(previous_daily_path) if previous_daily_path else None
    write_parquet(_measures(config, daily, previous), out)


def _measures(config: dict, daily: pl.LazyFrame, previous: pl.LazyFrame | str | None) -> pl.DataFrame:
    """The measures of the security-months of ``daily`` (one month or several), sorted by security and month."""
    from liqpanel.measures import compute_monthly
    from liqpanel.measures.frames import market_inputs

    if isinstance(previous, str):
        previous = pl.scan_parquet(previous)
    start, end = _calendar_span(config) if "sample" in config else (None, None)
    market = load_markets(config)
    members = market["_members"] if several(market) else {None: market}
    present = set(daily.select(MARKET).unique().collect().to_series().to_list()) if several(market) else {None}
    parts = []
    for code, profile in members.items():  # each market on its own: its tick, its market return, its trading days
        if code not in present:
            continue
        mine, before = daily, previous
        if code is not None:
            mine = daily.filter(pl.col(MARKET) == code).drop(MARKET)
            before = previous.filter(pl.col(MARKET) == code).drop(MARKET) if previous is not None else None
        mine, selection, calendar = market_inputs(mine, config["measures"], profile, start, end)
        if before is not None:
            before = market_inputs(before, config["measures"], profile, start, end)[0]
        parts.append(compute_monthly(mine, selection, previous=before, calendar=calendar))
    if not parts:  # a month without any row
        parts.append(compute_monthly(daily.drop(MARKET) if several(market) else daily,
                                     market_inputs(daily, config["measures"], None)[1], previous=None))
    return pl.concat(parts, how="diagonal_relaxed").sort("security", "month") if len(parts) > 1 else parts[0]


def _calendar_span(config: dict) -> tuple[date, date]:
    """First and last day of the market calendar a run needs (``markets.sample_span``)."""
    from liqpanel.markets import sample_span

    return sample_span(config["sample"]["start"], config["sample"]["end"])


def _market(config: dict) -> dict:
    """The run's market (one profile or several, ``marketset.load_markets``) with the early closes of each
    calendar-backed profile's calendar over the sample (``markets.for_sample``)."""
    from liqpanel.markets import for_sample

    market, span = load_markets(config), _calendar_span(config)
    if several(market):
        return {**market, "_members": {code: for_sample(m, *span) for code, m in market["_members"].items()}}
    return for_sample(market, *span)


def gather(paths: list[str], out: str, sort: list[str]) -> None:
    frames = [pl.scan_parquet(p) for p in paths]
    write_parquet(pl.concat(frames, how="diagonal_relaxed").sort(sort, nulls_last=True), out)


def gather_monthly(paths: list[str], out: str) -> None:
    """The month partitions' measures in one table, with the measures that span twelve months (Liu's LM12)."""
    from liqpanel.measures.frames import with_twelve_month_measures

    frame = pl.concat([pl.scan_parquet(p) for p in paths], how="diagonal_relaxed").sort("security", "month").collect()
    write_parquet(with_twelve_month_measures(frame), out)


def panel(config: dict, monthly_path: str, daily_paths: list[str], out: str, audit_out: str | None = None) -> None:
    """The panel (``out``) and, at ``audit_out``, where every characteristics row went (``characteristics_audit``)."""
    from liqpanel.panel import (
        build_panel, characteristics_audit, check_overlap, monthly_from_daily, read_characteristics, read_monthly_returns,
        transform_panel,
    )

    inputs = config["inputs"]
    source = config["panel"]["return_source"]
    securities = pl.scan_parquet(monthly_path).select("security").unique().collect().get_column("security")
    if source == "monthly_file" or (source == "auto" and inputs.get("returns")):
        layout = ingest.layout_of(config, "returns")
        returns = read_monthly_returns(layout)
        check_overlap(securities, returns.select("security").collect(), what="monthly returns file", path=layout.path,
                      column=layout.theirs("security"))
    else:
        # a month partition holds whole security-months: compounded one partition at a time (the same
        # products, in the same day order), many small groupings instead of one of the whole sample
        returns = pl.concat([monthly_from_daily(pl.scan_parquet(p)) for p in daily_paths])
    chars = [{**c, "frame": read_characteristics(c).lazy()} for c in inputs.get("characteristics", [])]
    for c in chars:
        check_overlap(securities, c["frame"].select("security").collect(), what=f"characteristics file '{c['name']}'",
                      path=c["path"], column=ingest.characteristics_layout(c).theirs("security"))
    built = build_panel(pl.scan_parquet(monthly_path), returns=returns, characteristics=chars)
    if config.get("markets"):
        from liqpanel.marketset import panel_to_reporting

        built = panel_to_reporting(built.collect() if isinstance(built, pl.LazyFrame) else built, config,
                                   load_markets(config))
    write_parquet(transform_panel(built, config["panel"]), out)
    if audit_out:
        write_parquet(characteristics_audit(built.select("security", "month"), chars), audit_out)


def read_truth(config: dict) -> pl.DataFrame:
    """The simulator's truth file (security, month, spread and other numbers) through the input contract."""
    return ingest.read_checked(
        ingest.layout_of(config, "truth"), ingest.Spec("truth file", months=("month",), other_numeric=True),
        key=("security", "month"),
    )


def models(config: dict, panel_path: str, monthly_path: str, out_dir: str) -> None:
    """Fit every configured model; write each result table and an index."""
    from liqpanel.measures import REGISTRY
    from liqpanel.models.run import run_models

    factors = _supplied_factors(config)
    sources = "; ".join(f"{name}: {REGISTRY[name].source}" for name in config["measures"])
    result = run_models(
        pl.read_parquet(panel_path), config["models"], monthly=pl.read_parquet(monthly_path), factors=factors,
        sources=sources,
    )
    out = Path(out_dir)
    index = []
    for table in result.tables:
        write_parquet(table.frame, out / f"{table.name}.parquet")
        index.append({"name": table.name, "caption": table.caption, "notes": table.notes})
    for name, series in result.series.items():
        write_parquet(series, out / "series" / f"{name}.parquet")
    if result.regressions_long is not None:
        write_parquet(result.regressions_long, out / "regressions_long.parquet")
    write_text(json.dumps(index, indent=2) + "\n", out / "index.json")


def _supplied_factors(config: dict) -> pl.DataFrame | None:
    """The user's factor file (``inputs.factors``) with ``month`` as the first day of the month, or None."""
    if not config["inputs"].get("factors"):
        return None
    return ingest.read_checked(
        ingest.layout_of(config, "factors"), ingest.Spec("factor file", text=(), months=("month",), other_numeric=True),
        key=("month",),
    )


def factors(config: dict, panel_path: str, out_dir: str, daily_paths: list[str] = ()) -> None:
    """Build the liquidity factors the ``factors:`` section selects; write tables, series and an index.

    Writes ``<out_dir>/<table>.parquet`` for each table, ``index.json``,
    ``aggregate.parquet`` and ``deciles.parquet`` (for the figures, when
    built) and ``factors.parquet`` (month, one column per factor).
    """
    from liqpanel.factors.run import FACTOR_UNITS, run_factors
    from liqpanel.measures import REGISTRY

    truth_path = config["inputs"].get("truth")
    measures = [o for name in config["measures"] if REGISTRY[name].family == "spread" for o in REGISTRY[name].outputs[:1]]
    measures += [o for o in ("effective_spread", "quoted_spread", "amihud") if o in config["measures"]]
    result = run_factors(
        pl.read_parquet(panel_path), config.get("factors", {}), supplied=_supplied_factors(config),
        lags=config["models"].get("lags", 6), truth=read_truth(config) if truth_path else None,
        recovery_measures=measures,
        daily=pl.concat([pl.scan_parquet(p) for p in daily_paths], how="diagonal_relaxed").collect()
        if daily_paths and config.get("factors", {}).get("commonality", {}).get("daily_measures") else None,
    )
    out = Path(out_dir)
    index = []
    for table in result.tables:
        write_parquet(table.frame, out / f"{table.name}.parquet")
        index.append({"name": table.name, "caption": table.caption, "notes": table.notes})
    for name in ("aggregate", "deciles", "factors"):
        frame = getattr(result, name)
        if frame is not None:
            write_parquet(frame, out / f"{name}.parquet")
    units = {c: FACTOR_UNITS[c] for c in (result.factors.columns if result.factors is not None else []) if c != "month"}
    write_text(json.dumps({"tables": index, "units": units}, indent=2) + "\n", out / "index.json")


def report(
    config: dict,
    rid: str,
    run_dir: str,
    *,
    monthly_path: str,
    panel_path: str,
    audit_path: str | None,
    models_dir: str,
    daily_audit_paths: list[str] | None = None,
    characteristics_audit_path: str | None = None,
    started: str,
    command: str,
    study_dir: str | None = None,
    factors_dir: str | None = None,
) -> None:
    """Write ``results/<run-id>/``: tables, figures, data, README, manifest.

    The folder is built beside its final place and moved there in one step,
    so it is either absent or complete. Before the move the inputs are
    checksummed again: if they changed while the workflow ran, the run stops
    instead of labelling its tables with a run-id that does not describe them.
    """
    from liqpanel import report as rep
    from liqpanel.measures import REGISTRY
    from liqpanel.panel import audit_summary, coverage
    from liqpanel.replication import write_replication_files

    build = rep.build_folder(Path(run_dir).parent, rid)
    monthly = pl.read_parquet(monthly_path)
    truth_path = config["inputs"].get("truth")
    truth = read_truth(config) if truth_path else None
    measures = list(config["measures"])
    outputs = [o for name in measures for o in REGISTRY[name].outputs]
    sources = rep.measure_sources(measures)
    settings = config["report"]
    out = rep.RunFolder(
        build, rid=rid, captions=settings.get("captions"), sample=rep.sample_note(config, monthly),
        digits=settings.get("digits", 3), labels=settings.get("labels"),
    )
    units = rep.units_note(config, measures)

    models = Path(models_dir)
    for entry in json.loads((models / "index.json").read_text()):
        frame, display, notes = pl.read_parquet(models / f"{entry['name']}.parquet"), None, entry["notes"]
        if entry["name"] == "regressions" and (models / "regressions_long.parquet").exists():
            # full-precision numbers in the CSV; the printed layout in LaTeX and Markdown
            frame, display = pl.read_parquet(models / "regressions_long.parquet"), frame
            used = {v for m in config["models"]["regressions"] for v in m["regressors"]}
            in_models = [n for n in measures if used & set(REGISTRY[n].outputs)]
            notes = rep.join_notes(
                rep.standard_errors_note(config["models"]["regressions"]),
                "Dependent variable: the next month's return, in decimals", rep.measure_sources(in_models),
            )
        elif "value-weighted" in notes:
            notes = rep.join_notes(notes, f"Market values in {rep.currency_of(config)}")
        # a column of different statistics (mean, t-statistic, beta...): decimals follow each row
        by_row = frame.width == 2 and frame.columns[0] == "statistic"
        out.table(entry["name"], frame, display=display, caption=entry["caption"], notes=notes, by_row=by_row)
    if factors_dir:
        render_factors(factors_dir, out, figures=settings["figures"])
    panel_frame = pl.read_parquet(panel_path)
    variables = sorted({v for m in config["models"].get("regressions", []) for v in m["regressors"]} | {"ret_next"})
    out.table(
        "panel_coverage", coverage(panel_frame, variables),
        caption="Panel coverage: securities per month and missing share per variable", label="tab:coverage",
        notes="Month t holds liquidity and characteristics known at t and the return of t+1; "
        "missing shares are fractions of the month's securities (1 = none has the variable)",
    )
    out.table(
        "measures_summary", rep.measure_summary(monthly, outputs),
        caption="Monthly measures: pooled distribution over security-months", label="tab:measures",
        notes=rep.join_notes(units, sources), by_row=True,
    )
    if audit_path:
        audit = pl.read_parquet(audit_path)
        out.table(
            "cleaning_audit", rep.audit_summary(audit),
            caption="Trade and quote cleaning: rows read, kept and dropped by rule", label="tab:audit",
            notes=rep.join_notes("Each row read is kept or dropped by the first rule it breaks", rep.timestamp_notes(audit)),
        )
    if daily_audit_paths:
        _daily_audit_tables(out, *daily_audit_paths)
    if characteristics_audit_path and config["inputs"].get("characteristics"):
        out.table(
            "characteristics_audit", audit_summary(pl.read_parquet(characteristics_audit_path)),
            caption="Characteristics: rows read, used and not used by reason", label="tab:characteristics_audit",
            notes="Each row is counted once, by the first that applies: no_date (never public); same_month (a "
            "later-dated row of the security is public in the same month); security_not_in_panel; replaced_before_use "
            "(a later row was public before any of the security's panel months); after_last_month; used (taken by at "
            "least one security-month, as of the month it is public, liqpanel.panel)",
        )
    spread_outputs = [o for name in measures if REGISTRY[name].family == "spread" for o in REGISTRY[name].outputs[:1]]
    if truth is not None and spread_outputs:
        out.table(
            "spread_vs_truth", rep.spread_against_truth(monthly, truth, spread_outputs),
            caption="Spread estimates against the simulator's true spread", label="tab:truth",
            notes=rep.join_notes("Proportional full spreads (0.01 = 1%)", rep.measure_sources(
                [n for n in measures if REGISTRY[n].family == "spread"])),
        )
    if settings["figures"]:
        figures = build / "figures"
        labels = settings.get("labels") or {}
        if spread_outputs:
            out.figure(
                "spread_median",
                rep.figure_median_spread(monthly, truth, spread_outputs, figures / "spread_median", rid, labels=labels),
                caption="Cross-sectional median of each spread estimate by month"
                + (", against the simulator's true spread" if truth is not None else ""),
                notes="Percent of the price",
            )
        if "effective_spread" in monthly.columns:
            out.figure(
                "effective_spread_median",
                rep.figure_median_spread(monthly, truth, ["effective_spread"], figures / "effective_spread_median", rid,
                                         labels=labels),
                caption="Cross-sectional median effective spread by month"
                + (", against the simulator's true spread" if truth is not None else ""),
                notes="Percent of the price",
            )
        sorts = {f"sort_{s['name']}": s for s in config["models"].get("sorts") or []}
        for series_path in sorted((models / "series").glob("*.parquet")):
            name = f"cumulative_{series_path.stem}"
            factor = config["models"].get("factor") or {}
            title = None if series_path.stem in sorts else (
                f"Cumulative value of 1 invested in the liquidity factor\n(least minus most liquid by "
                f"{rep.label_of(factor.get('measure', ''), labels)}, within {rep.label_of(factor.get('size', ''), labels)} groups)"
            )
            out.figure(
                name,
                rep.figure_cumulative(pl.read_parquet(series_path), figures / name, rid, spec=sorts.get(series_path.stem),
                                      labels=labels, title=title),
                caption=f"Cumulative value of 1 invested: {series_path.stem.replace('_', ' ')}",
                notes="Returns earned the month after formation; each line starts at 1 at the first formation month",
            )
        val = config["models"].get("validation")
        if val and val["benchmark"] in monthly.columns:
            proxies = [p for p in val["proxies"] if p in monthly.columns]
            if proxies:
                out.figure(
                    "proxy_vs_benchmark",
                    rep.figure_proxy_scatter(monthly, val["benchmark"], proxies, figures / "proxy_vs_benchmark", rid,
                                             labels=labels),
                    caption=f"Spread proxies against the benchmark {val['benchmark']}, by security-month",
                    notes="Percent of the price",
                )
    if study_dir:
        render_study(study_dir, out, figures=settings["figures"], min_cell=config["study"]["min_cell"])
    write_parquet(monthly, build / "data" / "monthly.parquet")
    write_parquet(panel_frame, build / "data" / "panel.parquet")

    identity = rep.check_identity(config, rid)
    inputs = rep.input_listing(config)
    contents = out.contents()
    finished = rep.now()
    git, machine = rep.git_state(), rep.machine()
    write_replication_files(
        build, rid=rid, config=config, inputs=inputs, contents=contents, command=command, git=git, machine=machine,
        elapsed=rep.elapsed_seconds(started, finished),
    )
    rep.write_manifest(
        build, config=config, inputs=inputs, rid=rid, started=started, command=command, finished=finished,
        identity=identity, contents=contents,
    )
    rep.publish_folder(build, run_dir)
    rep.point_latest(Path(run_dir).parent, rid)


def _daily_audit_tables(out: "rep.RunFolder", audit_path: str, splits_path: str) -> None:
    from liqpanel import dailyfile

    out.table(
        "daily_audit", dailyfile.audit_summary(pl.read_parquet(audit_path)),
        caption="Daily file: rows read, kept, dropped by rule and repaired", label="tab:daily_audit",
        notes="Each row read is kept or dropped by the first rule it breaks (liqpanel.dailyfile); repaired rows are "
        "kept with the named values cleared. Per security-month counts: data/daily_audit.parquet",
    )
    write_parquet(pl.read_parquet(audit_path), out.path / "data" / "daily_audit.parquet")
    splits = pl.read_parquet(splits_path)
    if splits.height:
        out.table(
            "daily_suspected_splits", splits.with_columns(pl.col("date").cast(pl.String)),
            caption="Daily file: days that look like a split the returns were not adjusted for",
            label="tab:daily_splits",
            notes="A return within 3% of a split's price ratio with a matching jump in volume; give the split in "
            "`inputs.adjustments` (liqpanel.dailyfile.suspected_splits)",
        )


def render_factors(factors_dir: str | Path, out: "rep.RunFolder", *, figures: bool = True) -> None:
    """Put the factors stage's output into a run folder: tables, figures, ``factors.csv``/``.parquet``."""
    from liqpanel import report as rep

    source = Path(factors_dir)
    index = json.loads((source / "index.json").read_text())
    for entry in index["tables"]:
        out.table(entry["name"], pl.read_parquet(source / f"{entry['name']}.parquet"),
                  caption=entry["caption"], notes=entry["notes"])
    if (source / "factors.parquet").exists():
        series = pl.read_parquet(source / "factors.parquet")
        write_parquet(series, out.path / "factors.parquet")
        write_text(series.write_csv(float_precision=None), out.path / "factors.csv")
        write_text(rep.factor_columns_text(index["units"]), out.path / "factors.md")
    if not figures:
        return
    folder = out.path / "figures"
    if (source / "aggregate.parquet").exists():
        aggregate = pl.read_parquet(source / "aggregate.parquet")
        for column, what, unit in (("level", "level (scaled by m_t/m_1)", ""), ("innovation", "innovation L_t", " / 100")):
            if aggregate.get_column(column).drop_nulls().len() < 2:
                continue
            name = f"market_liquidity_{column}"
            out.figure(
                name, rep.figure_market_liquidity(aggregate, column, what, folder / name, out.rid),
                caption=f"Market-wide liquidity by month: the {what}",
                notes=f"Pastor & Stambaugh (2003); return per unit of signed dollar volume{unit}",
            )
    if (source / "deciles.parquet").exists():
        deciles = pl.read_parquet(source / "deciles.parquet")
        for column, what in (("post_liq_beta", "post-formation liquidity beta"), ("mean_ret", "mean return")):
            if deciles.get_column(column).drop_nulls().len() < 2:
                continue  # too few months for the statistic: no figure rather than an empty one
            name = f"liquidity_beta_portfolios_{column}"
            out.figure(
                name, rep.figure_beta_portfolios(deciles, column, what, folder / name, out.rid),
                caption=f"Portfolios sorted on historical liquidity beta: {what}",
                notes="Pastor & Stambaugh (2003); returns earned the month after formation",
            )


def study(config: dict, daily_paths: list[str], monthly_path: str | None, out_dir: str) -> None:
    """Calibrate to the daily table, run the simulation study, write its tables and an index."""
    from liqpanel import study as st
    from liqpanel.markets import has_calendar, trading_days

    settings = config["study"]
    daily = pl.concat([pl.scan_parquet(p) for p in daily_paths], how="diagonal_relaxed")
    monthly = pl.read_parquet(monthly_path) if monthly_path else None
    profile = load_markets(config)  # several markets: the study simulates the first one's clock and calendar
    profile = next(iter(profile["_members"].values())) if several(profile) else profile
    calendar = None
    if has_calendar(profile):
        calendar = trading_days(profile, *_calendar_span(config)).select("date")
    pool, audit = st.calibrate(daily, monthly, study=settings, measures=config["measures"], calendar=calendar)
    market = st.Market.from_profile(profile, settings["overnight_share"])
    result = st.run_study(pool, study=settings, measures=config["measures"], market=market)
    out = Path(out_dir)
    index = []
    for table in st.result_tables(result, pool, audit):
        write_parquet(table.frame, out / f"{table.name}.parquet")
        index.append({"name": table.name, "caption": table.caption, "notes": table.notes})
    write_parquet(result.long, out / "draws.parquet")
    write_text(st.summary_text(result), out / "summary.md")
    write_text(json.dumps(index, indent=2) + "\n", out / "index.json")


def render_study(study_dir: str | Path, out: "RunFolder", *, figures: bool = True, min_cell: int = 20) -> None:
    """Put the study into a run folder: its tables, heat maps, summary and per-draw data."""
    from liqpanel import study as st

    source = Path(study_dir)
    for entry in json.loads((source / "index.json").read_text()):
        out.table(entry["name"], pl.read_parquet(source / f"{entry['name']}.parquet"),
                  caption=entry["caption"], notes=entry["notes"])
    if figures:
        by_cell = pl.read_parquet(source / "study_by_cell.parquet")
        paths = st.bias_maps(by_cell, out.path / "figures", out.rid, min_cell=min_cell, labels=out.labels)
        for kind in st.KINDS:
            mine = [p for p in paths if p.stem == f"study_bias_{kind}"]
            if mine:
                left_out = [out.labels.get(n) or n for n in st.unestimated(by_cell, kind)]
                out.figure(
                    f"study_bias_{kind}", mine,
                    caption=f"Mean bias of the {kind} estimators by true spread / volatility and trades per day",
                    notes="Simulated security-months calibrated to this market; percent of the mean truth"
                    + (f"; without an estimate in any draw, so not shown: {', '.join(left_out)}" if left_out else ""),
                )
    write_text((source / "summary.md").read_text(), out.path / "study_summary.md")
    write_parquet(pl.read_parquet(source / "draws.parquet"), out.path / "data" / "study_draws.parquet")


def study_report(config: dict, rid: str, study_dir: str, run_dir: str, *, started: str, command: str) -> None:
    """The study alone: ``results/study-<run-id>/`` with its tables, heat maps, summary and manifest.

    Built beside its final place and moved there in one step, like a full run's folder.
    """
    from liqpanel import report as rep

    build = rep.build_folder(Path(run_dir).parent, Path(run_dir).name)
    settings = config["report"]
    out = rep.RunFolder(build, rid=rid, captions=settings.get("captions"), digits=settings.get("digits", 3),
                        labels=settings.get("labels"))
    render_study(study_dir, out, figures=settings["figures"], min_cell=config["study"]["min_cell"])
    identity = rep.check_identity(config, rid)
    rep.write_manifest(
        build, config=config, inputs=rep.input_listing(config), rid=rid, started=started, command=command,
        identity=identity, contents=out.contents(),
    )
    rep.publish_folder(build, run_dir)


def now() -> str:
    from liqpanel import report as rep

    return rep.now()
