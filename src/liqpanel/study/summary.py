"""What the study reports: its ranked summary and its tables with captions."""

from __future__ import annotations

import math
from dataclasses import dataclass

import polars as pl

from liqpanel.measures.blend import NAME as BLEND
from liqpanel.study.calibration import describe_conditions
from liqpanel.study.evaluation import ranking
from liqpanel.study.run import StudyResult
from liqpanel.study.defaults import KINDS


def summary_text(result: StudyResult) -> str:
    """A short ranked summary of the measured results, with the sample sizes."""
    s, info = result.settings, result.info
    lines = ["# Which estimator is closest to the truth in conditions like this market's?", ""]
    origin = f"{info['pool']} calibrated security-months"
    if info.get("securities") is not None:
        origin += f" of {info['securities']} securities"
    if info.get("months"):
        first, last = info["months"]
        origin += f" ({first:%Y-%m} to {last:%Y-%m})"
    lines.append(
        f"Measured on {info['draws']} simulated security-months (seed {s['seed']}) drawn with replacement from "
        f"{origin}; window: the month (median {info['median_window']:.0f} trading days)."
    )
    details = []
    if info.get("spread_source"):
        details.append(f"spread level from {info['spread_source']}")
    details.append(f"daily volatility from {s['volatility']}" if info.get("spread_source") else "conditions as given")
    if info.get("trades_source"):
        details.append("trades per day from " + ", ".join(f"{k} ({v:.0%})" for k, v in info["trades_source"].items()))
    market = info["market"]
    details.append(f"tick {market.tick if market.tick else 'none'}, overnight share of variance {market.overnight_share:g}")
    lines += ["Calibration: " + "; ".join(details) + ".", ""]
    for kind, unit in (("spread", "percent of the price"), ("volatility", "percent per day")):
        ranked = ranking(result.overall, kind)
        if ranked.height == 0:
            continue
        lines.append(f"{kind.capitalize()} estimators ranked by RMSE ({unit}; over the months each one estimates):")
        lines.append("")
        for row in ranked.iter_rows(named=True):
            if row["rmse"] is None:
                lines.append(f"{row['rank']}. {row['estimator']}: no estimate in {info['draws']} months")
                continue
            lines.append(
                f"{row['rank']}. {row['estimator']}: RMSE {row['rmse'] * 100:.3f}, mean bias {row['mean_bias'] * 100:+.3f} "
                f"({row['relative_bias']:+.0%} of the truth), correlation with the truth "
                f"{_fmt(row['correlation'])}, missing {row['missing_share']:.1%} (n = {row['n_estimates']})"
            )
        lines.append("")
    spread_rank = ranking(result.overall, "spread").drop_nulls("rmse")
    vol_rank = ranking(result.overall, "volatility").drop_nulls("rmse")
    best = []
    if spread_rank.height:
        best.append(f"among spread estimators {spread_rank.item(0, 'estimator')} (RMSE {spread_rank.item(0, 'rmse') * 100:.3f}% of the price)")
    if vol_rank.height:
        best.append(f"among volatility estimators {vol_rank.item(0, 'estimator')} (RMSE {vol_rank.item(0, 'rmse') * 100:.3f}% per day)")
    if best:
        lines += [f"In this market's simulated conditions, lowest RMSE: {'; '.join(best)}.", ""]
    if spread_rank.height:
        least = spread_rank.sort(pl.col("mean_bias").abs(), "estimator").row(0, named=True)
        closest = spread_rank.drop_nulls("correlation").sort("correlation", "estimator", descending=[True, False])
        line = f"Among spread estimators, smallest mean bias: {least['estimator']} ({least['relative_bias']:+.0%} of the truth)"
        if closest.height:
            line += (f"; highest correlation with the true spread across security-months: "
                     f"{closest.item(0, 'estimator')} ({closest.item(0, 'correlation'):.2f})")
        lines += [line + ".", ""]
    if result.blend is not None:
        table = result.blend.table
        blend_row = table.filter(pl.col("estimator") == BLEND).row(0, named=True)
        best_single = table.filter(pl.col("estimator") != BLEND).sort("rmse_out_of_sample").row(0, named=True)
        weights = ", ".join(f"{n}: {w:.3f}" for n, w in result.blend.weights.items() if w > 0)
        lines += [
            f"Calibrated blend of the spread estimators (weights fitted on {blend_row['n_fit']} draws, scored on "
            f"{blend_row['n_scored']} others): {weights}. Out-of-sample RMSE {blend_row['rmse_out_of_sample'] * 100:.3f} "
            f"against {best_single['rmse_out_of_sample'] * 100:.3f} for the best single estimator "
            f"({best_single['estimator']}) on the same draws. Select it in a later run with "
            f"`measures: {BLEND}: {{weights: {{...}}}}` (table study_blend); it is a measurement on simulated data "
            "under the model's assumptions, not a published method.",
            "",
        ]
    covered = result.overall.filter(pl.col("coverage").is_not_null())
    for row in covered.iter_rows(named=True):
        lines.append(f"Coverage of the {row['estimator']} interval: {row['coverage']:.1%} of {row['n_estimates']} months "
                     "contain the true spread.")
    lines += [
        "",
        "These are measurements on the simulated Roll model under the calibrated conditions (spread, volatility, "
        "trading intensity and window drawn from this market), with the sample sizes stated; they are not advice. "
        "Bins and heat maps: tables study_by_spread_vol, study_by_intensity, study_by_cell and figures study_bias_spread, study_bias_volatility.",
    ]
    return "\n".join(lines) + "\n"


@dataclass(frozen=True)
class StudyTable:
    name: str
    frame: pl.DataFrame
    caption: str
    notes: str = ""


def result_tables(result: StudyResult, pool: pl.DataFrame | None = None, audit: pl.DataFrame | None = None) -> list[StudyTable]:
    """The study's tables for the report, each with its caption and note."""
    n = result.info["draws"]
    units = ("Spreads and volatilities are proportions (0.01 = 1% of the price; volatility per day); bias = "
             "estimate - truth over the months with an estimate; relative_bias = mean bias / mean truth; coverage: "
             "share of intervals containing the true spread.")
    bins = (f"Bins of the true spread / daily volatility (spread_vol) and of the true trades per day (intensity): "
            f"{'given edges' if result.settings['spread_vol_edges'] or result.settings['intensity_edges'] else 'quantiles of the draws'}.")
    where = f"{n} security-months simulated from the Roll model with conditions drawn from this market (seed {result.settings['seed']})."
    tables = [
        StudyTable("study_estimators", result.overall, "Estimators against the simulated truth, all drawn security-months",
                   f"{where} {units}"),
        StudyTable(
            "study_ranking",
            pl.concat([ranking(result.overall, kind).select(pl.lit(kind).alias("kind"), pl.all()) for kind in KINDS]),
            "Estimators ranked by RMSE within spread and volatility estimators",
            f"{where} RMSE over the months each estimator estimates; missing_share beside it. {units}",
        ),
        StudyTable("study_by_spread_vol", result.by_spread_vol, "Estimators against the truth by bins of spread / volatility",
                   f"{where} {bins} {units}"),
        StudyTable("study_by_intensity", result.by_intensity, "Estimators against the truth by bins of trades per day",
                   f"{where} {bins} {units}"),
        StudyTable("study_by_cell", result.by_cell, "Estimators against the truth by spread / volatility and trades per day",
                   f"{where} {bins} {units}"),
    ]
    if result.blend is not None:
        tables.append(StudyTable(
            "study_blend", result.blend.table,
            "A calibrated blend of the spread estimators: weights and out-of-sample RMSE beside each estimator",
            f"{where} Non-negative weights summing to one, minimising the RMSE against the true spread on the even "
            "draws with every component estimated (components: spread estimators missing in at most "
            f"{result.settings['blend_max_missing']:.0%} of the draws); RMSE and bias scored on the odd draws. A "
            f"measurement on simulated data under the model's assumptions; select it with `measures: {BLEND}`. {units}",
        ))
    if pool is not None and "spread" in pool.columns:
        tables.append(StudyTable(
            "study_calibration", describe_conditions(pool), "Calibrated conditions of this market: distribution over security-months",
            f"The draws resample these security-months whole, keeping their joint distribution. "
            f"Spread: {result.info.get('spread_source')}; volatility: {result.settings['volatility']}.",
        ))
    if audit is not None:
        tables.append(StudyTable("study_calibration_audit", audit, "Calibration: security-months read, kept and dropped by rule",
                                 f"A security-month needs at least {result.settings['min_days']} days with a trade "
                                 "(study.min_days), a positive volatility and a spread level."))
    return tables


def _fmt(x: float | None) -> str:
    return "n/a" if x is None or (isinstance(x, float) and math.isnan(x)) else f"{x:.2f}"
