"""The factors job: the liquidity factors the ``factors:`` section selects, written with an index."""

from __future__ import annotations

import json
from pathlib import Path

import polars as pl

from liqpanel.core.io import write_parquet, write_text
from liqpanel.core.settings import FactorSettings, InputSettings, MeasureSettings, ModelSettings
from liqpanel.ingest.supplied import read_factors, read_truth


def run_factors(panel_path: str, out_dir: str, daily_paths: list[str] = (), *, inputs: InputSettings,
                measures: MeasureSettings, models: ModelSettings, factors: FactorSettings) -> None:
    """Build the liquidity factors the ``factors:`` section selects; write tables, series and an index.

    Writes ``<out_dir>/<table>.parquet`` for each table, ``index.json``,
    ``aggregate.parquet`` and ``deciles.parquet`` (for the figures, when
    built) and ``factors.parquet`` (month, one column per factor).
    """
    from liqpanel.factors.run import FACTOR_UNITS
    from liqpanel.factors.run import run_factors as build
    from liqpanel.measures import REGISTRY

    names = measures.names
    recovery = [o for name in names if REGISTRY[name].family == "spread" for o in REGISTRY[name].outputs[:1]]
    recovery += [o for o in ("effective_spread", "quoted_spread", "amihud") if o in names]
    commonality = factors.commonality or {}
    result = build(
        pl.read_parquet(panel_path), factors.as_dict(), supplied=read_factors(inputs),
        lags=models.lags if models.lags is not None else 6, truth=read_truth(inputs) if inputs.path("truth") else None,
        recovery_measures=recovery,
        daily=pl.concat([pl.scan_parquet(p) for p in daily_paths], how="diagonal_relaxed").collect()
        if daily_paths and commonality.get("daily_measures") else None,
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
