"""The study's heat maps of the bias by condition."""

from __future__ import annotations

import math

import polars as pl

from liqpanel.study.defaults import KINDS


def unestimated(by_cell: pl.DataFrame, kind: str) -> list[str]:
    """Estimators of ``kind`` without a single estimate in any cell (an effective tick in a market without a tick)."""
    counts = by_cell.filter(pl.col("kind") == kind).group_by("estimator", maintain_order=True).agg(pl.col("n_estimates").sum())
    return counts.filter(pl.col("n_estimates") == 0).get_column("estimator").to_list()


def bias_maps(
    by_cell: pl.DataFrame, out_dir, rid: str, *, min_cell: int = 20, limit: float = 100.0, labels: dict | None = None,
) -> list:
    """Heat maps of the mean bias in percent of the mean truth by (spread / volatility, trades per day) bin.

    One figure per kind (``study_bias_spread``, ``study_bias_volatility``,
    PNG and PDF in ``out_dir``), one panel per estimator titled with its
    name in print (``labels``, as in the tables), all on the same colour
    scale (+-``limit`` percent). A cell shows the bias and its number of
    estimates; one with fewer than ``min_cell`` estimates stays blank. An
    estimator without a single estimate has no panel (see ``unestimated``).
    """
    from pathlib import Path

    from liqpanel.report import figures

    cols = by_cell.select("spread_vol_bin", "spread_vol_range").unique().sort("spread_vol_bin")
    rows = by_cell.select("intensity_bin", "intensity_range").unique().sort("intensity_bin")
    col_index = {b: j for j, b in enumerate(cols.get_column("spread_vol_bin"))}
    row_index = {b: i for i, b in enumerate(rows.get_column("intensity_bin"))}
    paths = []
    for kind in KINDS:
        panels = {}
        skip = set(unestimated(by_cell, kind))
        for (name,), frame in by_cell.filter(pl.col("kind") == kind).group_by("estimator", maintain_order=True):
            if name in skip:
                continue
            values = [[None] * cols.height for _ in range(rows.height)]
            notes = [[""] * cols.height for _ in range(rows.height)]
            for r in frame.iter_rows(named=True):
                i, j = row_index[r["intensity_bin"]], col_index[r["spread_vol_bin"]]
                bias = r["relative_bias"]
                if r["n_estimates"] >= min_cell and bias is not None and math.isfinite(bias):
                    values[i][j] = 100.0 * bias
                    notes[i][j] = f"{100.0 * bias:+.0f}%\nn={r['n_estimates']}"
                else:
                    notes[i][j] = f"n={r['n_estimates']}"
            panels[(labels or {}).get(name) or name] = (values, notes)
        if not panels:
            continue
        first = next(n for n in by_cell.filter(pl.col("kind") == kind).get_column("estimator") if n not in skip)
        draws = by_cell.filter(pl.col("estimator") == first).get_column("n").sum()
        paths += figures.heat_maps(
            panels, stem=Path(out_dir) / f"study_bias_{kind}", rid=rid, limit=limit,
            title=f"Mean bias of the {kind} estimators by condition ({draws} simulated security-months)",
            xlabel="true spread / daily volatility (ratio)", ylabel="true trades per day (mean)",
            colorbar_label=f"mean bias, % of the mean true {kind}",
            col_labels=cols.get_column("spread_vol_range").to_list(), row_labels=rows.get_column("intensity_range").to_list(),
        )
    return paths
