"""The estimator study's jobs: calibrate and simulate, and its tables and heat maps in a run folder or one of its own."""

from __future__ import annotations

import json
from pathlib import Path
from typing import TYPE_CHECKING

import polars as pl

from liqpanel.core.io import write_parquet, write_text
from liqpanel.core.settings import InputSettings, MarketSettings, MeasureSettings, SampleSettings, Settings, StudySettings
from liqpanel.markets.several import calendar_span, load_markets, several

if TYPE_CHECKING:
    from liqpanel.report import RunFolder


def run_study(daily_paths: list[str], monthly_path: str | None, out_dir: str, *, inputs: InputSettings,
              sample: SampleSettings, market: MarketSettings, measures: MeasureSettings, study: StudySettings) -> None:
    """Calibrate to the daily table, run the simulation study, write its tables and an index."""
    from liqpanel import study as st
    from liqpanel.markets import has_calendar, trading_days

    settings, selected = study.as_dict(), measures.as_dict()
    daily = pl.concat([pl.scan_parquet(p) for p in daily_paths], how="diagonal_relaxed")
    monthly = pl.read_parquet(monthly_path) if monthly_path else None
    profile = load_markets(market.as_config(inputs))  # several markets: the study simulates the first one's clock and calendar
    profile = next(iter(profile["_members"].values())) if several(profile) else profile
    calendar = None
    if has_calendar(profile):
        calendar = trading_days(profile, *calendar_span(sample)).select("date")
    pool, audit = st.calibrate(daily, monthly, study=settings, measures=selected, calendar=calendar)
    simulated = st.Market.from_profile(profile, settings["overnight_share"])
    result = st.run_study(pool, study=settings, measures=selected, market=simulated)
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


def run_study_report(rid: str, study_dir: str, run_dir: str, *, started: str, command: str, settings: Settings) -> None:
    """The study alone: ``results/study-<run-id>/`` with its tables, heat maps, summary and manifest.

    Built beside its final place and moved there in one step, like a full run's folder.
    """
    from liqpanel import report as rep

    config = settings.as_config()
    build = rep.build_folder(Path(run_dir).parent, Path(run_dir).name)
    look = config["report"]
    out = rep.RunFolder(build, rid=rid, captions=look.get("captions"), digits=look.get("digits", 3),
                        labels=look.get("labels"))
    render_study(study_dir, out, figures=look["figures"], min_cell=settings.study.min_cell)
    identity = rep.check_identity(config, rid)
    rep.write_manifest(
        build, config=config, inputs=rep.input_listing(config), rid=rid, started=started, command=command,
        identity=identity, contents=out.contents(),
    )
    rep.publish_folder(build, run_dir)
