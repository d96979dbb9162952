"""The clean job: a month's (or a small market's span of months') trades and quotes read, cleaned and audited."""

from __future__ import annotations

import polars as pl

from liqpanel import ingest
from liqpanel.clean import reading as readers
from liqpanel.clean.audit import audit_of, check_conservation, kept_rows
from liqpanel.clean.flags import flag_quotes, flag_trades
from liqpanel.clean.rules import QUOTE_COLUMNS, TRADE_COLUMNS, month_number
from liqpanel.core.errors import InputError
from liqpanel.core.io import write_parquet
from liqpanel.core.partition import stored_window
from liqpanel.core.settings import CleanSettings, InputSettings, MarketSettings, SampleSettings
from liqpanel.markets.several import attach, run_market, several


def run_clean(
    month: str, out_trades: str, out_audit: str, out_quotes: str | None = None, *, inputs: InputSettings,
    sample: SampleSettings, market: MarketSettings, clean: CleanSettings,
) -> tuple[pl.DataFrame, pl.DataFrame | None]:
    """Clean one month partition of the trades (and quotes, when the config names them).

    Returns the clean trades and quotes as written (quotes None when no
    ``out_quotes`` is given), so that the bars of the month need not read
    them back. A file the engine
    cannot read to the end (a corrupt Parquet page, a truncated gzip) stops
    the run naming that file.
    """
    (kept, quotes), = clean_months([month], [out_trades], [out_audit], [out_quotes], inputs=inputs, sample=sample,
                                   market=market, clean=clean)
    return kept, quotes


def clean_months(
    months: list[str], out_trades: list[str], out_audit: list[str], out_quotes: list[str | None], *,
    inputs: InputSettings, sample: SampleSettings, market: MarketSettings, clean: CleanSettings,
    loaded: dict | None = None,
) -> list[tuple[pl.DataFrame, pl.DataFrame | None]]:
    """Clean consecutive months in one pass: their rows read, ordered and flagged as one frame, then
    cut into month partitions, each written as ``run_clean`` writes it alone (every rule works within
    a security and timestamp or a security-day). Returns each month's clean trades and quotes. A file
    the engine cannot read to the end (a corrupt Parquet page, a truncated gzip) stops the run naming
    that file. ``loaded``: the run's market as ``run_market`` gives it, when the caller has it already."""
    try:
        loaded = run_market(market, inputs, sample) if loaded is None else loaded
        return _clean_months(months, out_trades, out_audit, out_quotes, inputs, loaded, clean.as_dict(),
                             (sample.start, sample.end))
    except (pl.exceptions.PolarsError, OSError) as exc:
        raise ingest.damaged([inputs.path(k) for k in ("quotes", "trades") if inputs.path(k)],
                             inputs.as_config()["formats"], exc) from None


def _clean_months(months: list[str], out_trades: list[str], out_audit: list[str], out_quotes: list[str | None],
                  inputs: InputSettings, market: dict, rules: dict, sample: tuple[str, str]):
    config = inputs.as_config()
    columns, formats = config["columns"], config["formats"]
    audits, quotes, tz = [], None, market["timezone"]
    several_months = len(months) > 1
    month = months if several_months else months[0]

    # several markets: each row's month is that of its own market's clock
    zones = tuple(sorted({p["timezone"] for p in market["_members"].values()})) if several(market) else ()

    def window(schema: pl.Schema) -> pl.Expr | None:  # only these months' rows leave the file
        conditions = [stored_window(schema, m, sample, tz, zones) for m in months]
        return None if any(c is None for c in conditions) else pl.any_horizontal(conditions) if several_months \
            else conditions[0]

    if inputs.path("quotes"):
        read = readers.read_table(inputs.path("quotes"), columns.get("quotes", {}), readers.QUOTES_SPEC, tz, window,
                                  fmt=formats.get("quotes"))
        flagged = flag_quotes(_with_market(read, "quotes", inputs, market), market, rules, month=month,
                              sample=sample).collect()
        _stop_on_unparseable(flagged, read, "quotes", rules, columns.get("quotes"))
        quotes = kept_rows(flagged, QUOTE_COLUMNS, month_number=several_months).collect()
        audits.append(audit_of(flagged, "quotes", month=month, timestamps=read.describe_timestamps(), sample=sample))
    read = readers.read_table(inputs.path("trades"), columns.get("trades", {}), readers.TRADES_SPEC, tz, window,
                              fmt=formats.get("trades"))
    matched = quotes.lazy().drop("_month", strict=False) if quotes is not None else None
    flagged = flag_trades(_with_market(read, "trades", inputs, market), market, rules, month=month, sample=sample,
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
        quotes = by_month(quotes, "_month", numbers) if several_months else [quotes]
    if several_months:  # each month's rows, in the frame's order
        kept, audit = by_month(kept, "_month", numbers), by_month(audit, "partition", months, keep=True)
    else:
        kept, audit = [kept], [audit]
    for i in range(len(months)):
        write_parquet(kept[i], out_trades[i], passing=True)
        write_parquet(audit[i], out_audit[i])
        if out_quotes[i]:
            write_parquet(quotes[i], out_quotes[i], passing=True)
    has_quotes = bool(inputs.path("quotes")) or any(out_quotes)
    return [(kept[i], quotes[i] if has_quotes else None) for i in range(len(months))]


def by_month(frame: pl.DataFrame, column: str, keys: list, *, keep: bool = False) -> list[pl.DataFrame]:
    """``frame`` cut on ``column`` into one frame per key of ``keys`` (empty where none), rows in order;
    ``column`` is dropped unless ``keep``."""
    parts = frame.partition_by(column, as_dict=True, maintain_order=True, include_key=keep)
    empty = frame.clear() if keep else frame.clear().drop(column)
    return [parts.get((key,), empty) for key in keys]


def _with_market(read, key: str, inputs: InputSettings, market: dict) -> pl.LazyFrame:
    """The rows read with each security's market code (several markets); an unknown security names its row."""
    return attach(read.frame, market, layout=ingest.layout_of(inputs.as_config(), key))


def _stop_on_unparseable(flagged: pl.DataFrame, read, table: str, rules: dict, mapping: dict | None = None) -> None:
    if rules.get("unparseable", "error") == "error":
        error = readers.unparseable_error(flagged, read.files, table, mapping=mapping)
        if error is not None:
            raise error




def check_inputs(*, inputs: InputSettings, market: MarketSettings) -> None:
    """What the pre-flight check (``liqpanel.preflight``) leaves to the readers, before any job runs:
    the trade and quote files' columns and types through their reader, a trade file with no data
    rows, the adjustments file read whole, and a daily file with its own returns beside adjustments.

    Raises ConfigError or InputError naming the profile, file or column;
    row-level problems are found later, by the clean stage and the daily file's job.
    """
    from liqpanel.markets.several import load_markets

    timezone = load_markets(market.as_config(inputs))["timezone"]
    config = inputs.as_config()
    for key, spec in (("trades", readers.TRADES_SPEC), ("quotes", readers.QUOTES_SPEC)):
        if inputs.path(key):
            read = readers.read_table(inputs.path(key), config["columns"].get(key, {}), spec, timezone,
                                      fmt=config["formats"].get(key))
            if key == "trades" and not ingest.collect(read.frame.select("_row").head(1), inputs.path(key)).height:
                raise InputError("the trade file has a header but no data rows; nothing can be measured",
                                 path=inputs.path(key))
    if inputs.path("adjustments"):
        read_adjustments(inputs)
    if inputs.path("daily") and inputs.path("adjustments"):
        from liqpanel.bars.daily_file import ADJUSTED_TWICE

        layout = ingest.layout_of(config, "daily")
        file = ingest.list_files(layout.path)[0]
        if "ret" in ingest.schema_of(ingest.scan_file(file, layout, 1), file):
            raise ingest.error(layout, ADJUSTED_TWICE, file=file, column="ret")


def read_adjustments(inputs: InputSettings) -> pl.DataFrame | None:
    """The split and dividend file (``inputs.adjustments``), or None."""
    if not inputs.path("adjustments"):
        return None
    config = inputs.as_config()
    return readers.read_adjustments(inputs.path("adjustments"), config["columns"].get("adjustments", {}),
                                    config["formats"].get("adjustments"))
