"""The whole study: draw, simulate, estimate and evaluate."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import polars as pl

from liqpanel.measures import compute_monthly
from liqpanel.measures.frames import with_market_settings
from liqpanel.study.blend import Blend, fit_blend
from liqpanel.study.draws import Market, draw_conditions, simulate_draws
from liqpanel.study.evaluation import add_bins, estimates_of, long_estimates, summarise
from liqpanel.study.defaults import WINDOW_MONTH, check_settings, estimator_selection


@dataclass
class StudyResult:
    """Everything the study measured.

    ``long``: one row per draw and estimator; ``overall``, ``by_spread_vol``,
    ``by_intensity``, ``by_cell``: the statistics overall and by bins;
    ``truth``: the simulated security-months with their bins; ``conditions``:
    the draws; ``settings``: the settings as run; ``info``: counts for the
    summary; ``blend``: the proposed blend of spread estimators (``fit_blend``).
    """

    long: pl.DataFrame
    overall: pl.DataFrame
    by_spread_vol: pl.DataFrame
    by_intensity: pl.DataFrame
    by_cell: pl.DataFrame
    truth: pl.DataFrame
    conditions: pl.DataFrame
    settings: dict[str, Any]
    info: dict[str, Any] = field(default_factory=dict)
    blend: Blend | None = None


def run_study(
    pool: pl.DataFrame,
    *,
    study: dict[str, Any] | None = None,
    measures: dict[str, Any] | None = None,
    market: Market | None = None,
) -> StudyResult:
    """Draw, simulate, estimate and evaluate (steps 2-5 of the docstring of ``liqpanel.study``).

    ``pool``: calibrated security-months (from ``calibrate``, or any frame
    with ``spread``, ``daily_vol``, ``trades_per_day``, ``n_days`` and
    optionally ``price``). ``study``: the settings (``DEFAULTS``);
    ``measures``: the user's ``measures:`` section, whose options the study
    uses; ``market``: time zone, session, tick (``Market()``, the simulator's
    default market, when not given; its overnight share is taken from the
    settings).
    """
    s = check_settings(study)
    market = market or Market()
    market = Market(market.timezone, tuple(market.session), market.tick, float(s["overnight_share"]))
    selection = with_market_settings(estimator_selection(measures, s["measures"]), market.tick)
    conditions = draw_conditions(pool, s["draws"], s["seed"])
    daily, truth = simulate_draws(conditions, market, s["seed"])
    monthly = compute_monthly(daily.lazy(), selection).filter(pl.col("month") == WINDOW_MONTH).drop("month")
    truth = add_bins(truth, s)
    long = long_estimates(monthly, truth, estimates_of(selection))
    info = {
        "draws": conditions.height,
        "pool": pool.height,
        "securities": pool.get_column("security").n_unique() if "security" in pool.columns else None,
        "months": (pool.get_column("month").min(), pool.get_column("month").max()) if "month" in pool.columns else None,
        "median_window": float(conditions.get_column("n_days").median()),
        "spread_source": pool.get_column("spread_source")[0] if "spread_source" in pool.columns and pool.height else None,
        "trades_source": _shares(pool, "trades_source"),
        "market": market,
    }
    overall = summarise(long)
    return StudyResult(
        long=long,
        overall=overall,
        blend=fit_blend(long, overall, float(s["blend_max_missing"])),
        by_spread_vol=summarise(long, ["spread_vol_bin", "spread_vol_range"]),
        by_intensity=summarise(long, ["intensity_bin", "intensity_range"]),
        by_cell=summarise(long, ["spread_vol_bin", "spread_vol_range", "intensity_bin", "intensity_range"]),
        truth=truth,
        conditions=conditions,
        settings=s,
        info=info,
    )


def _shares(frame: pl.DataFrame, column: str) -> dict[str, float] | None:
    if column not in frame.columns or frame.height == 0:
        return None
    counts = frame.group_by(column).len().sort(column)
    return {row[0]: row[1] / frame.height for row in counts.iter_rows()}
