"""File-level entry points of the workflow: one function per rule.

Each function reads its input files, calls the stage's logic and writes its
outputs atomically. The Snakemake rules in ``workflow/rules/`` call these and
nothing else, so every stage can be run and tested without Snakemake.
"""

from __future__ import annotations

import json
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import polars as pl

from liqpanel import bars as bars_mod
from liqpanel import report as rep
from liqpanel import readers
from liqpanel.clean import QUOTE_COLUMNS, TRADE_COLUMNS, audit_of, check_conservation, flag_quotes, flag_trades, kept_rows
from liqpanel.config import load_market
from liqpanel.contracts import DAILY, month_of, require_columns
from liqpanel.io import previous_month, scan_table, write_parquet, write_text
from liqpanel.measures import REGISTRY, compute_monthly
from liqpanel.panel import build_panel, monthly_from_daily, read_monthly_returns


def _month_filter(month: str) -> pl.Expr:
    return pl.col("month") == pl.lit(f"{month}-01").str.to_date()


def check_inputs(config: dict) -> None:
    """Check the market profile and every input file's columns before any job runs.

    Raises ConfigError or InputError naming the profile, file or column;
    row-level problems are found later, by the clean stage.
    """
    market = load_market(config["market"])
    inputs, columns = config["inputs"], config.get("columns", {})
    for key, spec in (("trades", readers.TRADES_SPEC), ("quotes", readers.QUOTES_SPEC)):
        if inputs.get(key):
            readers.read_table(inputs[key], columns.get(key, {}), spec, market["timezone"])
    if inputs.get("adjustments"):
        readers.read_adjustments(inputs["adjustments"], columns.get("adjustments", {}))


def clean_month(config: dict, month: str, out_trades: str, out_audit: str, out_quotes: str | None = None) -> None:
    """Clean one month partition of the trades (and quotes, when the config names them)."""
    market = load_market(config["market"])
    rules = config["clean"]
    sample = (config["sample"]["start"], config["sample"]["end"])
    columns = config.get("columns", {})
    audits, quotes, tz = [], None, market["timezone"]
    if config["inputs"].get("quotes"):
        read = readers.read_table(config["inputs"]["quotes"], columns.get("quotes", {}), readers.QUOTES_SPEC, tz)
        flagged = flag_quotes(read.frame, market, rules, month=month, sample=sample).collect()
        _stop_on_unparseable(flagged, read, "quotes", rules)
        quotes = kept_rows(flagged, QUOTE_COLUMNS).collect()
        audits.append(audit_of(flagged, "quotes", month=month, timestamps=read.describe_timestamps()))
    read = readers.read_table(config["inputs"]["trades"], columns.get("trades", {}), readers.TRADES_SPEC, tz)
    flagged = flag_trades(
        read.frame, market, rules, month=month, sample=sample, quotes=quotes.lazy() if quotes is not None else None
    )
    _stop_on_unparseable(flagged, read, "trades", rules)
    kept = kept_rows(flagged, TRADE_COLUMNS).collect()
    audits.append(audit_of(flagged, "trades", month=month, timestamps=read.describe_timestamps()))
    audit = pl.concat(pl.collect_all(audits), how="diagonal_relaxed").sort("table", "security", "date", nulls_last=True)
    check_conservation(audit)
    write_parquet(kept, out_trades)
    write_parquet(audit, out_audit)
    if out_quotes:
        empty = pl.DataFrame(schema={"security": pl.String, "ts": pl.Datetime("us", "UTC"), "bid": pl.Float64,
                                     "ask": pl.Float64, "date": pl.Date})
        write_parquet(quotes if quotes is not None else empty, out_quotes)


def _stop_on_unparseable(flagged: pl.DataFrame, read, table: str, rules: dict) -> None:
    if rules.get("unparseable", "error") == "error":
        error = readers.unparseable_error(flagged, read.files, table)
        if error is not None:
            raise error


def bars_month(clean_trades_path: str, out: str, config: dict | None = None, clean_quotes_path: str | None = None) -> None:
    """Daily bars of one month; with a config, also the high-frequency benchmarks."""
    trades = pl.scan_parquet(clean_trades_path)
    if config is None:
        write_parquet(bars_mod.trading_bars(trades), out)
        return
    market = load_market(config["market"])
    quotes = pl.scan_parquet(clean_quotes_path) if clean_quotes_path else None
    write_parquet(bars_mod.intraday_bars(trades, quotes, market, config.get("bars")), out)


def daily_month(bars_path: str, previous_bars_path: str | None, out: str, config: dict | None = None) -> None:
    previous = pl.scan_parquet(previous_bars_path) if previous_bars_path else None
    adjustments = None
    if config is not None and config["inputs"].get("adjustments"):
        mapping = config["columns"].get("adjustments", {})
        adjustments = readers.read_adjustments(config["inputs"]["adjustments"], mapping)
    write_parquet(bars_mod.add_returns(pl.scan_parquet(bars_path), previous, adjustments), out)


def daily_from_file(config: dict, month: str, out: str) -> None:
    """The daily entry point: one month of a user's own daily file."""
    path = config["inputs"]["daily"]
    lf = scan_table(path, config["columns"].get("daily", {}))
    required = [c for c in DAILY if c not in ("month", "n_trades", "dollar_volume")]
    require_columns(lf, required, table="daily", path=path)
    names = lf.collect_schema().names()
    lf = lf.with_columns(pl.col("date").cast(pl.Date), pl.col("security").cast(pl.String))
    lf = lf.with_columns(month_of("date").alias("month"))
    if "dollar_volume" not in names:
        lf = lf.with_columns((pl.col("close") * pl.col("volume")).alias("dollar_volume"))
    if "n_trades" not in names:
        lf = lf.with_columns(pl.lit(None, dtype=pl.Int64).alias("n_trades"))
    write_parquet(lf.filter(_month_filter(month)).sort("security", "date"), out)


def measures_month(config: dict, daily_path: str, out: str) -> None:
    write_parquet(compute_monthly(pl.scan_parquet(daily_path), config["measures"]), out)


def gather(paths: list[str], out: str, sort: list[str]) -> None:
    frames = [pl.scan_parquet(p) for p in paths]
    write_parquet(pl.concat(frames, how="diagonal_relaxed").sort(sort, nulls_last=True), out)


def panel(config: dict, monthly_path: str, daily_paths: list[str], out: str) -> None:
    inputs = config["inputs"]
    source = config["panel"]["return_source"]
    if source == "monthly_file" or (source == "auto" and inputs.get("returns")):
        returns = read_monthly_returns(inputs["returns"], config["columns"].get("returns", {}))
    else:
        returns = monthly_from_daily(pl.concat([pl.scan_parquet(p) for p in daily_paths]))
    chars = [
        {**c, "frame": scan_table(c["path"])}
        for c in inputs.get("characteristics", [])
    ]
    write_parquet(build_panel(pl.scan_parquet(monthly_path), returns=returns, characteristics=chars), out)


def models(config: dict, panel_path: str, out_results: str, out_table: str) -> None:
    from liqpanel.models import ModelSpec, fit_model, regression_table

    frame = pl.read_parquet(panel_path)
    specs = [ModelSpec.from_config(m) for m in config["models"]["regressions"]]
    results = [fit_model(frame, s) for s in specs]
    long = pl.DataFrame(
        [
            {
                "model": r.name, "estimator": r.estimator, "covariance": r.covariance, "variable": v,
                "coef": r.params[v], "std_error": r.std_errors[v], "tstat": r.tstats[v], "pvalue": r.pvalues[v],
                "nobs": r.nobs, "n_months": r.n_months, "r2": r.r2,
            }
            for r in results
            for v in r.params
        ],
        schema_overrides={"nobs": pl.Int64, "n_months": pl.Int64},
    ) if results else pl.DataFrame()
    write_parquet(long, out_results)
    write_parquet(regression_table(results) if results else pl.DataFrame(), out_table)


def report(
    config: dict,
    rid: str,
    run_dir: str,
    *,
    monthly_path: str,
    panel_path: str,
    audit_path: str | None,
    regression_table_path: str,
    started: str,
    command: str,
) -> None:
    run = Path(run_dir)
    tables, figures, data = run / "tables", run / "figures", run / "data"
    monthly = pl.read_parquet(monthly_path)
    truth_path = config["inputs"].get("truth")
    truth = pl.read_parquet(truth_path) if truth_path else None
    outputs = [o for name in config["measures"] for o in REGISTRY[name].outputs]
    sources = "; ".join(f"{name}: {REGISTRY[name].source}" for name in config["measures"])

    reg = pl.read_parquet(regression_table_path)
    if reg.height:
        rep.write_table(
            reg, tables / "regressions",
            caption="Regressions of next-month return on liquidity",
            label="tab:regressions",
            notes="t-statistics in parentheses. " + sources,
        )
    rep.write_table(
        rep.measure_summary(monthly, outputs), tables / "measures_summary",
        caption="Monthly measures: pooled distribution over security-months",
        label="tab:measures", notes=sources,
    )
    if audit_path:
        audit = pl.read_parquet(audit_path)
        rep.write_table(
            rep.audit_summary(audit), tables / "cleaning_audit",
            caption="Trade and quote cleaning: rows read, kept and dropped by rule",
            label="tab:audit",
            notes="Each row read is kept or dropped by the first rule it breaks. " + rep.timestamp_notes(audit),
        )
    if config["report"]["figures"] and "effective_spread" in monthly.columns:
        rep.figure_median_spread(monthly, truth, "effective_spread", figures / "effective_spread_median", rid)
    spread_outputs = [o for name in config["measures"] if REGISTRY[name].family == "spread" for o in REGISTRY[name].outputs[:1]]
    if truth is not None and spread_outputs:
        rep.write_table(
            rep.spread_against_truth(monthly, truth, spread_outputs), tables / "spread_vs_truth",
            caption="Spread estimates against the simulator's true spread",
            label="tab:truth", notes="Proportional full spreads (0.01 = 1%). " + sources,
        )
    if config["report"]["figures"] and "roll_spread" in monthly.columns:
        rep.figure_median_spread(monthly, truth, "roll_spread", figures / "roll_spread_median", rid)
    write_parquet(monthly, data / "monthly.parquet")
    write_parquet(pl.read_parquet(panel_path), data / "panel.parquet")
    rep.write_manifest(run, config=config, inputs=rep.input_files(config), rid=rid, started=started, command=command)
    rep.point_latest(run.parent, rid)


def now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")
