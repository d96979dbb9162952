"""File-level entry points of the workflow: one function per rule.

Each function reads its input files, calls the stage's logic and writes its
outputs atomically. The Snakemake rules in ``workflow/rules/`` call these and
nothing else, so every stage can be run and tested without Snakemake.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import polars as pl

from liqpanel import bars as bars_mod
from liqpanel import report as rep
from liqpanel.clean import check_conservation, clean_trades, read_trades
from liqpanel.config import load_market
from liqpanel.contracts import DAILY, month_of, require_columns
from liqpanel.io import previous_month, scan_table, write_parquet, write_text
from liqpanel.measures import REGISTRY, compute_monthly
from liqpanel.replication import write_replication_files
from liqpanel.panel import build_panel, monthly_from_daily, read_monthly_returns


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
    regression_results_path: str | None = None,
) -> None:
    """Write ``results/<run-id>/``: tables, figures, data, README, manifest.

    The folder is built beside its final place and moved there in one step,
    so it is either absent or complete. Before the move the inputs are
    checksummed again: if they changed while the workflow ran, the run stops
    instead of labelling its tables with a run-id that does not describe them.
    """
    build = rep.build_folder(Path(run_dir).parent, rid)
    monthly = pl.read_parquet(monthly_path)
    truth_path = config["inputs"].get("truth")
    truth = pl.read_parquet(truth_path) if truth_path else None
    measures = list(config["measures"])
    outputs = [o for name in measures for o in REGISTRY[name].outputs]
    sources = rep.measure_sources(measures)
    settings = config["report"]
    out = rep.RunFolder(
        build, rid=rid, captions=settings.get("captions"), sample=rep.sample_note(config, monthly),
        digits=settings.get("digits", 4),
    )

    reg = pl.read_parquet(regression_table_path)
    if reg.height:
        numbers = pl.read_parquet(regression_results_path) if regression_results_path else reg
        out.table(
            "regressions", numbers, display=reg,
            caption="Regressions of next-month return on liquidity",
            notes=rep.join_notes(rep.standard_errors_note(config["models"]["regressions"]), sources),
        )
    out.table(
        "measures_summary", rep.measure_summary(monthly, outputs),
        caption="Monthly measures: pooled distribution over security-months", label="tab:measures", notes=sources,
    )
    if audit_path:
        out.table(
            "cleaning_audit", rep.audit_summary(pl.read_parquet(audit_path)),
            caption="Trade cleaning: rows read, kept and dropped by rule", label="tab:audit",
            notes="Each row read is kept or dropped by the first rule it breaks",
        )
    spread_outputs = [o for name in measures if REGISTRY[name].family == "spread" for o in REGISTRY[name].outputs[:1]]
    if truth is not None and spread_outputs:
        out.table(
            "spread_vs_truth", rep.spread_against_truth(monthly, truth, spread_outputs),
            caption="Spread estimates against the simulator's true spread", label="tab:truth",
            notes=rep.join_notes("Proportional full spreads (0.01 = 1%)", sources),
        )
    if settings["figures"] and "roll_spread" in monthly.columns:
        out.figure(
            "roll_spread_median",
            rep.figure_median_spread(monthly, truth, "roll_spread", build / "figures" / "roll_spread_median", rid),
            caption="Cross-sectional median of the Roll (1984) spread by month"
            + (", against the simulator's true spread" if truth is not None else ""),
            notes="Percent of the price",
        )
    write_parquet(monthly, build / "data" / "monthly.parquet")
    write_parquet(pl.read_parquet(panel_path), build / "data" / "panel.parquet")

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


def now() -> str:
    return rep.now()
