"""The models job: every configured regression, sort and factor portfolio, written with an index."""

from __future__ import annotations

import json
from pathlib import Path

import polars as pl

from liqpanel.core.io import write_parquet, write_text
from liqpanel.core.settings import InputSettings, MeasureSettings, ModelSettings
from liqpanel.ingest.supplied import read_factors


def run_models(panel_path: str, monthly_path: str, out_dir: str, *, inputs: InputSettings, measures: MeasureSettings,
               models: ModelSettings) -> None:
    """Fit every configured model; write each result table and an index."""
    from liqpanel.measures import REGISTRY
    from liqpanel.models.run import run_models as fit

    factors = read_factors(inputs)
    sources = "; ".join(f"{name}: {REGISTRY[name].source}" for name in measures.names)
    result = fit(
        pl.read_parquet(panel_path), models.as_dict(), monthly=pl.read_parquet(monthly_path), factors=factors,
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
