"""The models and factors jobs: every configured regression, sort and factor, written with an index."""

from __future__ import annotations

import json
from pathlib import Path

import polars as pl

from liqpanel.core.io import write_parquet, write_text
from liqpanel.stages.shared import _supplied_factors, read_truth


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
