"""The report job: the run folder with its tables, figures, data, replication files and manifest."""

from __future__ import annotations

import json
from pathlib import Path
from typing import TYPE_CHECKING

import polars as pl

from liqpanel.core.io import write_parquet, write_text
from liqpanel.core.settings import Settings
from liqpanel.ingest.supplied import read_truth
from liqpanel.study.job import render_study

if TYPE_CHECKING:
    from liqpanel import report as rep


def run_report(
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
    settings: Settings,
) -> None:
    """Write ``results/<run-id>/``: tables, figures, data, README, manifest.

    It reads every section of the settings: the manifest, the run-id check
    and the replication files record the run as a whole.

    The folder is built beside its final place and moved there in one step,
    so it is either absent or complete. Before the move the inputs are
    checksummed again: if they changed while the workflow ran, the run stops
    instead of labelling its tables with a run-id that does not describe them.
    """
    from liqpanel import report as rep
    from liqpanel.measures import REGISTRY
    from liqpanel.panel import audit_summary, coverage
    from liqpanel.report.replication import write_replication_files

    config = settings.as_config()
    build = rep.build_folder(Path(run_dir).parent, rid)
    monthly = pl.read_parquet(monthly_path)
    truth = read_truth(settings.inputs) if settings.inputs.path("truth") else None
    measures = list(settings.measures.names)
    outputs = [o for name in measures for o in REGISTRY[name].outputs]
    sources = rep.measure_sources(measures)
    look = settings.report.as_dict()
    out = rep.RunFolder(
        build, rid=rid, captions=look.get("captions"), sample=rep.sample_note(config, monthly),
        digits=look.get("digits", 3), labels=look.get("labels"),
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
        render_factors(factors_dir, out, figures=look["figures"])
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
    if look["figures"]:
        figures = build / "figures"
        labels = look.get("labels") or {}
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
        render_study(study_dir, out, figures=look["figures"], min_cell=settings.study.min_cell)
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
    from liqpanel.bars import daily_file as dailyfile

    out.table(
        "daily_audit", dailyfile.audit_summary(pl.read_parquet(audit_path)),
        caption="Daily file: rows read, kept, dropped by rule and repaired", label="tab:daily_audit",
        notes="Each row read is kept or dropped by the first rule it breaks (liqpanel.bars.daily_file); repaired rows are "
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
            "`inputs.adjustments` (liqpanel.bars.daily_file.suspected_splits)",
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
