"""The calibrated blend: spread estimators weighted to minimise the simulated RMSE, scored out of sample."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import polars as pl

from liqpanel.measures.blend import NAME as BLEND


@dataclass(frozen=True)
class Blend:
    """The blend of spread estimators the study proposes: its weights and its out-of-sample comparison."""

    weights: dict[str, float]
    table: pl.DataFrame  # estimator, weight, rmse_fit, rmse_out_of_sample, mean_bias_out_of_sample, n_fit, n_scored


def blend_weights(estimates: np.ndarray, truth: np.ndarray) -> np.ndarray:
    """Non-negative weights summing to one that minimise sum (estimates @ w - truth)^2.

    Non-negative least squares (``scipy.optimize.nnls``) on the rows
    augmented with the constraint row penalty x (1, ..., 1) = penalty, which
    holds the sum at one to about 1e-9 of the scale; the weights are then
    divided by their sum.
    """
    from scipy.optimize import nnls

    scale = max(float(np.sqrt(np.mean(truth**2))), 1e-12)
    penalty = 1e6 * scale * np.sqrt(len(truth))
    design = np.vstack([estimates, np.full((1, estimates.shape[1]), penalty)])
    target = np.append(truth, penalty)
    weights, _ = nnls(design, target, maxiter=50 * estimates.shape[1])
    return weights / weights.sum() if weights.sum() > 0 else np.full(estimates.shape[1], 1.0 / estimates.shape[1])


def fit_blend(long: pl.DataFrame, overall: pl.DataFrame, max_missing: float) -> Blend | None:
    """Weights of the spread estimators that minimise the simulated RMSE, fitted on half the draws, scored on the other.

    Components: the spread estimators missing in at most ``max_missing`` of
    the draws. Draws with every component present; even draw numbers fit
    the weights (``blend_weights``), odd ones score them: the RMSE of the
    blend and of each component over the same scored draws. None when fewer
    than two estimators qualify or a half is empty. A measurement on data
    simulated under the Roll model with the market's calibrated conditions,
    not a published method.
    """
    eligible = (overall.filter((pl.col("kind") == "spread") & (pl.col("missing_share") <= max_missing)
                               & pl.col("rmse").is_not_null())
                .get_column("estimator").to_list())
    if len(eligible) < 2:
        return None
    wide = (long.filter(pl.col("estimator").is_in(eligible))
            .pivot(on="estimator", index=["draw", "truth"], values="estimate")
            .drop_nulls().sort("draw"))
    fit_rows, score_rows = wide.filter(pl.col("draw") % 2 == 0), wide.filter(pl.col("draw") % 2 == 1)
    if fit_rows.height == 0 or score_rows.height == 0:
        return None
    weights = blend_weights(fit_rows.select(eligible).to_numpy(), fit_rows.get_column("truth").to_numpy())

    def errors(rows: pl.DataFrame, column: np.ndarray) -> tuple[float, float]:
        e = column - rows.get_column("truth").to_numpy()
        return float(np.sqrt(np.mean(e**2))), float(np.mean(e))

    columns = {name: (fit_rows.get_column(name).to_numpy(), score_rows.get_column(name).to_numpy()) for name in eligible}
    columns[BLEND] = (fit_rows.select(eligible).to_numpy() @ weights, score_rows.select(eligible).to_numpy() @ weights)
    rows = []
    for name, (fitted, scored) in columns.items():
        rmse_fit, _ = errors(fit_rows, fitted)
        rmse_out, bias_out = errors(score_rows, scored)
        rows.append({"estimator": name, "weight": 1.0 if name == BLEND else float(weights[eligible.index(name)]),
                     "rmse_fit": rmse_fit, "rmse_out_of_sample": rmse_out, "mean_bias_out_of_sample": bias_out,
                     "n_fit": fit_rows.height, "n_scored": score_rows.height})
    table = pl.DataFrame(rows, schema_overrides={"n_fit": pl.Int64, "n_scored": pl.Int64})
    return Blend(weights={n: float(w) for n, w in zip(eligible, weights)}, table=table)
