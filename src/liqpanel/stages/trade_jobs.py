"""The clean and bars jobs: a month's (or a small market's span of months') trades and quotes cleaned, audited and put into intraday bars."""

from __future__ import annotations

from pathlib import Path

import polars as pl

from liqpanel import bars as bars_mod
from liqpanel import ingest
from liqpanel.clean import reading as readers
from liqpanel.clean import (
    QUOTE_COLUMNS, TRADE_COLUMNS, audit_of, check_conservation, flag_quotes, flag_trades, kept_rows, month_number,
)
from liqpanel.core.errors import InputError
from liqpanel.core.io import write_parquet
from liqpanel.markets.several import attach, several
from liqpanel.core.partition import stored_window
from liqpanel.stages.shared import _market, _month_start


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
    from liqpanel.core.io import month_range

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
