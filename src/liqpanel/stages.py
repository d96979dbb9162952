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
from liqpanel.clean import check_conservation, clean_trades, read_trades
from liqpanel.config import load_market
from liqpanel.contracts import DAILY, month_of, require_columns
from liqpanel.errors import InputError
from liqpanel.io import previous_month, scan_table, write_parquet, write_text
from liqpanel.measures import REGISTRY, compute_monthly
from liqpanel.panel import build_panel, coverage, monthly_from_daily, read_monthly_returns, transform_panel


def _month_filter(month: str) -> pl.Expr:
    return pl.col("month") == pl.lit(f"{month}-01").str.to_date()


def clean_month(config: dict, month: str, out_trades: str, out_audit: str) -> None:
    market = load_market(config["market"])
    path = config["inputs"]["trades"]
    trades = read_trades(path, config["columns"].get("trades", {}), market)
    sample = (config["sample"]["start"], config["sample"]["end"])
    kept, audit = clean_trades(trades, market, config["clean"], month=month, sample=sample)
    kept, audit = pl.collect_all([kept, audit])
    check_conservation(audit)
    write_parquet(kept, out_trades)
    write_parquet(audit, out_audit)


def bars_month(clean_trades_path: str, out: str) -> None:
    write_parquet(bars_mod.trading_bars(pl.scan_parquet(clean_trades_path)), out)


def daily_month(bars_path: str, previous_bars_path: str | None, out: str) -> None:
    previous = pl.scan_parquet(previous_bars_path) if previous_bars_path else None
    write_parquet(bars_mod.add_returns(pl.scan_parquet(bars_path), previous), out)


def read_daily_file(path: str, mapping: dict[str, str]) -> pl.LazyFrame:
    """A user's daily file in the daily contract (see DEVELOPERS.md).

    Needs security, date, open, high, low, close and volume; ``dollar_volume``
    defaults to close x volume, ``n_trades`` to missing, and ``ret`` to the
    close-to-close return (only when the file has no return column: a
    vendor's adjusted return is always preferred). ``shares_out`` is kept
    when present.
    """
    lf = scan_table(path, mapping)
    required = ["security", "date", "open", "high", "low", "close", "volume"]
    require_columns(lf, required, table="daily", path=path)
    schema = lf.collect_schema()
    for column in ("open", "high", "low", "close", "volume"):
        if not schema[column].is_numeric():
            raise InputError(f"expected numbers, found {schema[column]}", path=path, column=column)
    date = pl.col("date").str.to_date("%Y-%m-%d", strict=False) if schema["date"] == pl.String else pl.col("date").cast(pl.Date)
    lf = lf.with_columns(date.alias("date"), pl.col("security").cast(pl.String))
    bad = lf.filter(pl.col("date").is_null()).select(pl.len()).collect().item()
    if bad:
        raise InputError(f"{bad} rows have a date that is missing or not YYYY-MM-DD", path=path, column="date")
    lf = lf.with_columns(month_of("date").alias("month"))
    if "dollar_volume" not in schema:
        lf = lf.with_columns((pl.col("close") * pl.col("volume")).alias("dollar_volume"))
    if "n_trades" not in schema:
        lf = lf.with_columns(pl.lit(None, dtype=pl.Int64).alias("n_trades"))
    if "ret" not in schema:
        lf = bars_mod.add_returns(lf)
    keep = [*DAILY, *[c for c in ("shares_out", "mkt_ret") if c in schema]]
    return lf.select(
        [pl.col(c).cast(t) for c, t in DAILY.items()] + [pl.col(c).cast(pl.Float64) for c in keep[len(DAILY):]]
    ).sort("security", "date")


def daily_from_file(config: dict, month: str, out: str) -> None:
    """The daily entry point: one month partition of a user's own daily file."""
    lf = read_daily_file(config["inputs"]["daily"], config["columns"].get("daily", {}))
    write_parquet(lf.filter(_month_filter(month)), out)


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
    built = build_panel(pl.scan_parquet(monthly_path), returns=returns, characteristics=chars)
    write_parquet(transform_panel(built, config["panel"]), out)


def models(config: dict, panel_path: str, monthly_path: str, out_dir: str) -> None:
    """Fit every configured model; write each result table and an index."""
    from liqpanel.models.run import run_models

    factors = None
    if config["inputs"].get("factors"):
        path = config["inputs"]["factors"]
        factors = scan_table(path, config["columns"].get("factors", {})).collect()
        if "month" not in factors.columns:
            raise InputError("the factor file needs a 'month' column", path=path, column="month")
        factors = factors.with_columns(month_of(pl.col("month").cast(pl.Date)).alias("month"))
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


def report(
    config: dict,
    rid: str,
    run_dir: str,
    *,
    monthly_path: str,
    panel_path: str,
    audit_path: str | None,
    models_dir: str,
    started: str,
    command: str,
    study_dir: str | None = None,
) -> None:
    run = Path(run_dir)
    tables, figures, data = run / "tables", run / "figures", run / "data"
    monthly = pl.read_parquet(monthly_path)
    truth_path = config["inputs"].get("truth")
    truth = pl.read_parquet(truth_path) if truth_path else None
    outputs = [o for name in config["measures"] for o in REGISTRY[name].outputs]
    sources = "; ".join(f"{name}: {REGISTRY[name].source}" for name in config["measures"])

    models = Path(models_dir)
    for entry in json.loads((models / "index.json").read_text()):
        rep.write_table(
            pl.read_parquet(models / f"{entry['name']}.parquet"), tables / entry["name"],
            caption=entry["caption"], label=f"tab:{entry['name']}", notes=entry["notes"],
        )
    panel_frame = pl.read_parquet(panel_path)
    variables = sorted({v for m in config["models"].get("regressions", []) for v in m["regressors"]} | {"ret_next"})
    rep.write_table(
        coverage(panel_frame, variables), tables / "panel_coverage",
        caption="Panel coverage: securities per month and missing share per variable",
        label="tab:coverage", notes="Month t holds liquidity and characteristics known at t and the return of t+1.",
    )
    rep.write_table(
        rep.measure_summary(monthly, outputs), tables / "measures_summary",
        caption="Monthly measures: pooled distribution over security-months",
        label="tab:measures", notes=sources,
    )
    if audit_path:
        rep.write_table(
            rep.audit_summary(pl.read_parquet(audit_path)), tables / "cleaning_audit",
            caption="Trade cleaning: rows read, kept and dropped by rule",
            label="tab:audit", notes="Each row read is kept or dropped by the first rule it breaks.",
        )
    spread_outputs = [o for name in config["measures"] if REGISTRY[name].family == "spread" for o in REGISTRY[name].outputs[:1]]
    if truth is not None and spread_outputs:
        rep.write_table(
            rep.spread_against_truth(monthly, truth, spread_outputs), tables / "spread_vs_truth",
            caption="Spread estimates against the simulator's true spread",
            label="tab:truth", notes="Proportional full spreads (0.01 = 1%). " + sources,
        )
    if config["report"]["figures"]:
        if spread_outputs:
            rep.figure_median_spread(monthly, truth, spread_outputs, figures / "spread_median", rid)
        for series_path in sorted((models / "series").glob("*.parquet")):
            rep.figure_cumulative(pl.read_parquet(series_path), figures / f"cumulative_{series_path.stem}", rid)
        val = config["models"].get("validation")
        if val and val["benchmark"] in monthly.columns:
            proxies = [p for p in val["proxies"] if p in monthly.columns]
            if proxies:
                rep.figure_proxy_scatter(monthly, val["benchmark"], proxies, figures / "proxy_vs_benchmark", rid)
    if study_dir:
        render_study(study_dir, run, rid, figures=config["report"]["figures"], min_cell=config["study"]["min_cell"])
    write_parquet(monthly, data / "monthly.parquet")
    write_parquet(panel_frame, data / "panel.parquet")
    rep.write_manifest(run, config=config, inputs=rep.input_files(config), rid=rid, started=started, command=command)
    rep.point_latest(run.parent, rid)


def study(config: dict, daily_paths: list[str], monthly_path: str | None, out_dir: str) -> None:
    """Calibrate to the daily table, run the simulation study, write its tables and an index."""
    from liqpanel import study as st

    settings = config["study"]
    daily = pl.concat([pl.scan_parquet(p) for p in daily_paths], how="diagonal_relaxed")
    monthly = pl.read_parquet(monthly_path) if monthly_path else None
    pool, audit = st.calibrate(daily, monthly, study=settings, measures=config["measures"])
    market = st.Market.from_profile(load_market(config["market"]), settings["overnight_share"])
    result = st.run_study(pool, study=settings, measures=config["measures"], market=market)
    out = Path(out_dir)
    index = []
    for table in st.result_tables(result, pool, audit):
        write_parquet(table.frame, out / f"{table.name}.parquet")
        index.append({"name": table.name, "caption": table.caption, "notes": table.notes})
    write_parquet(result.long, out / "draws.parquet")
    write_text(st.summary_text(result), out / "summary.md")
    write_text(json.dumps(index, indent=2) + "\n", out / "index.json")


def render_study(study_dir: str | Path, run_dir: str | Path, rid: str, *, figures: bool = True, min_cell: int = 20) -> None:
    """Put the study into a run folder: its tables, heat maps, summary and per-draw data."""
    from liqpanel import study as st

    source, run = Path(study_dir), Path(run_dir)
    for entry in json.loads((source / "index.json").read_text()):
        rep.write_table(
            pl.read_parquet(source / f"{entry['name']}.parquet"), run / "tables" / entry["name"],
            caption=entry["caption"], label=f"tab:{entry['name']}", notes=entry["notes"],
        )
    if figures:
        st.bias_maps(pl.read_parquet(source / "study_by_cell.parquet"), run / "figures", rid, min_cell=min_cell)
    write_text((source / "summary.md").read_text(), run / "study_summary.md")
    write_parquet(pl.read_parquet(source / "draws.parquet"), run / "data" / "study_draws.parquet")


def study_report(config: dict, rid: str, study_dir: str, run_dir: str, *, started: str, command: str) -> None:
    """The study alone: ``results/study-<run-id>/`` with its tables, heat maps, summary and manifest."""
    run = Path(run_dir)
    render_study(study_dir, run, rid, figures=config["report"]["figures"], min_cell=config["study"]["min_cell"])
    rep.write_manifest(run, config=config, inputs=rep.input_files(config), rid=rid, started=started, command=command)


def now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")
