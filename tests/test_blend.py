"""The calibrated blend of spread estimators: constrained least squares, the out-of-sample split, the measure."""

from datetime import date, timedelta

import numpy as np
import polars as pl
import pytest
from scipy.optimize import minimize

from liqpanel.core.errors import ConfigError
from liqpanel.measures import compute_monthly
from liqpanel.study import blend_weights, fit_blend, summarise


def test_weights_recover_a_known_combination():
    # known truth: the truth is exactly 0.3 e1 + 0.7 e2 (e3 unrelated), so the constrained fit returns (0.3, 0.7, 0)
    rng = np.random.default_rng(1)
    e = rng.uniform(0.001, 0.02, (500, 3))
    truth = e @ np.array([0.3, 0.7, 0.0])
    np.testing.assert_allclose(blend_weights(e, truth), [0.3, 0.7, 0.0], atol=1e-6)


def test_weights_equal_scipy_slsqp_on_noisy_estimators():
    # reference library: scipy.optimize.minimize (SLSQP) with w >= 0 and sum w = 1
    rng = np.random.default_rng(2)
    truth = rng.uniform(0.002, 0.02, 800)
    e = np.column_stack([truth * 1.3 + rng.normal(0, 0.002, 800), truth * 0.8 + rng.normal(0, 0.004, 800),
                         truth + rng.normal(0, 0.01, 800)])
    ours = blend_weights(e, truth)
    reference = minimize(lambda w: np.sum((e @ w - truth) ** 2), np.full(3, 1 / 3), method="SLSQP",
                         bounds=[(0, None)] * 3, constraints=[{"type": "eq", "fun": lambda w: w.sum() - 1}],
                         options={"ftol": 1e-15, "maxiter": 500}).x
    np.testing.assert_allclose(ours, reference, atol=1e-4)
    assert ours.sum() == pytest.approx(1.0, abs=1e-12) and (ours >= 0).all()


def _long(n: int, seed: int) -> pl.DataFrame:
    """Two unbiased, independent noisy estimators of the same truth, and one often missing."""
    rng = np.random.default_rng(seed)
    truth = rng.uniform(0.002, 0.02, n)
    estimates = {"a": truth + rng.normal(0, 0.003, n), "b": truth + rng.normal(0, 0.003, n),
                 "c": np.where(rng.random(n) < 0.5, truth, np.nan)}
    return pl.concat([
        pl.DataFrame({"draw": np.arange(n), "estimator": name, "kind": "spread", "estimate": values, "truth": truth},
                     nan_to_null=True).with_columns((pl.col("estimate") - pl.col("truth")).alias("error"),
                                                    pl.lit(None, dtype=pl.Float64).alias("lower"),
                                                    pl.lit(None, dtype=pl.Float64).alias("upper"))
        for name, values in estimates.items()
    ])


def test_blend_is_fitted_on_even_draws_and_scored_on_odd_ones():
    # Two independent unbiased estimators with equal error variance: the best blend averages them, and its
    # out-of-sample RMSE is about 1 / sqrt(2) of each one's (0.0021 against 0.003; tolerance 10%).
    long = _long(4000, seed=3)
    overall = summarise(long)
    blend = fit_blend(long, overall, max_missing=0.05)
    assert set(blend.weights) == {"a", "b"}  # c is missing in half the draws
    assert blend.weights["a"] == pytest.approx(0.5, abs=0.05)
    table = blend.table.sort("estimator")
    assert table["n_fit"].to_list() == [2000] * 3 and table["n_scored"].to_list() == [2000] * 3
    rmse = dict(zip(table["estimator"], table["rmse_out_of_sample"]))
    assert rmse["spread_blend"] == pytest.approx(0.003 / np.sqrt(2), rel=0.10)
    assert rmse["spread_blend"] < min(rmse["a"], rmse["b"])


def test_the_blend_measure_is_the_weighted_sum_of_its_components():
    rng = np.random.default_rng(4)
    days = [date(2021, 1, 4) + timedelta(days=i) for i in range(21)]
    close = 20 * np.exp(np.cumsum(rng.normal(0, 0.02, (3, 21)), axis=1))
    daily = pl.DataFrame({
        "security": np.repeat(["A", "B", "C"], 21), "date": days * 3, "month": [date(2021, 1, 1)] * 63,
        "close": close.ravel(), "open": close.ravel() * 1.001, "high": close.ravel() * 1.01,
        "low": close.ravel() * 0.99, "volume": 100.0,
    }).with_columns((pl.col("close") / pl.col("close").shift(1).over("security") - 1).alias("ret"))
    weights = {"edge_spread": 0.25, "ar_spread_monthly": 0.75}
    out = compute_monthly(daily.lazy(), {"spread_blend": {"weights": weights}, **{n: None for n in weights}})
    expected = 0.25 * out["edge_spread"] + 0.75 * out["ar_spread_monthly"]
    np.testing.assert_allclose(out["spread_blend"].to_numpy(), expected.to_numpy(), rtol=1e-12)
    with pytest.raises(ConfigError, match="sum to one"):
        compute_monthly(daily.lazy(), {"spread_blend": {"weights": {"edge_spread": 0.5}}})
    with pytest.raises(ConfigError, match="not a spread measure"):
        compute_monthly(daily.lazy(), {"spread_blend": {"weights": {"amihud": 1.0}}})
