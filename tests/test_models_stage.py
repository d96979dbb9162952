"""The models stage as configured, the panel transforms, and the demo's planted premium."""

from datetime import date
from pathlib import Path

import numpy as np
import polars as pl
import pytest

from liqpanel.bars import daily_bars
from liqpanel.measures import compute_monthly
from liqpanel.models.run import run_models
from liqpanel.panel import build_panel, coverage, read_monthly_returns, transform_panel

DEMO = Path(__file__).resolve().parents[1] / "demo_data"


def _panel(n_sec=30, n_months=12, seed=3):
    rng = np.random.default_rng(seed)
    months = [date(2021 + (m // 12), m % 12 + 1, 1) for m in range(n_months)]
    spread = rng.uniform(0.002, 0.03, size=(n_sec, n_months))
    size = rng.normal(20, 1, size=(n_sec, n_months))
    ret = 0.005 + 2.0 * spread + rng.normal(0, 0.01, size=(n_sec, n_months))
    return pl.DataFrame(
        {
            "security": np.repeat([f"S{i:02d}" for i in range(n_sec)], n_months),
            "month": months * n_sec,
            "spread": spread.ravel(),
            "log_size": size.ravel(),
            "market_cap": np.exp(size.ravel()),
            "ret_next": ret.ravel(),
        }
    )


def test_winsorize_clips_at_monthly_quantiles():
    panel = _panel()
    out = transform_panel(panel, {"winsorize": {"variables": ["spread"], "lower": 0.1, "upper": 0.9}})
    for (month,), frame in panel.group_by("month"):
        x = frame["spread"].to_numpy()
        lo, hi = np.quantile(x, [0.1, 0.9])  # reference: numpy linear interpolation
        got = out.filter(pl.col("month") == month).sort("security")["spread"].to_numpy()
        want = np.clip(frame.sort("security")["spread"].to_numpy(), lo, hi)
        np.testing.assert_allclose(got, want, rtol=1e-12)


def test_standardize_and_log():
    panel = _panel().with_columns(pl.when(pl.col("security") == "S00").then(0.0).otherwise(pl.col("spread")).alias("spread"))
    out = transform_panel(panel, {"log": ["spread"], "standardize": ["log_size"]})
    assert out.filter(pl.col("security") == "S00")["log_spread"].null_count() == out["month"].n_unique()
    by_month = out.group_by("month").agg(pl.col("log_size").mean().alias("m"), pl.col("log_size").std().alias("s"))
    assert by_month["m"].abs().max() < 1e-12 and (by_month["s"] - 1).abs().max() < 1e-12


def test_unknown_transform_variable_is_named():
    from liqpanel.core.errors import InputError

    with pytest.raises(InputError, match="'nope'"):
        transform_panel(_panel(), {"standardize": ["nope"]})


def test_coverage_counts_missing_shares():
    panel = _panel(n_sec=4, n_months=2).with_columns(
        pl.when(pl.col("security") == "S00").then(None).otherwise(pl.col("spread")).alias("spread")
    )
    cov = coverage(panel, ["spread", "ret_next"])
    assert cov["securities"].to_list() == [4, 4]
    assert cov["missing_spread"].to_list() == [0.25, 0.25]
    assert cov["missing_ret_next"].to_list() == [0.0, 0.0]


def test_run_models_produces_every_configured_table():
    panel = _panel().with_columns(pl.col("spread").alias("benchmark"))
    models = {
        "lags": 2,
        "regressions": [{"name": "m1", "regressors": ["spread"], "estimator": "fama_macbeth", "lags": 2}],
        "sorts": [
            {"name": "s", "variable": "spread", "portfolios": 3, "min_securities": 2},
            {"name": "d", "variable": "spread", "within": "log_size", "within_portfolios": 2, "portfolios": 3,
             "weight": "value", "min_securities": 2},
        ],
        "factor": {"measure": "spread", "size": "log_size", "size_groups": 2, "liquidity_groups": 3, "min_securities": 2},
        "validation": {"benchmark": "benchmark", "proxies": ["spread"]},
    }
    out = run_models(panel, models, monthly=panel)
    names = [t.name for t in out.tables]
    assert names == ["regressions", "sort_s", "sort_d", "liquidity_factor", "proxy_validation"]
    # planted slope 2.0 on the spread (this test's own simulation). Band derived
    # from the design: a month's OLS slope has standard error
    # 0.01 / (sd(spread) sqrt(30 - 1)) with sd(spread) = 0.028 / sqrt(12)
    # (uniform on [0.002, 0.03]), i.e. 0.229; the Fama-MacBeth mean over 12
    # independent months has standard error 0.229 / sqrt(12) = 0.066. The
    # band is 4 standard errors (measured: coefficient 1.9995, its Newey-West
    # standard error 0.054).
    long = out.regressions_long.filter(pl.col("variable") == "spread")
    se_fm = 0.01 / (0.028 / np.sqrt(12) * np.sqrt(29)) / np.sqrt(12)
    assert long["coef"][0] == pytest.approx(2.0, abs=4 * se_fm)
    hml = out.tables[1].frame.filter(pl.col("portfolio") == "high-low")["mean_ret"][0]
    # top-minus-bottom tercile of 30 spreads uniform on [0.002, 0.03], times the
    # slope 2: the expected top and bottom ten order statistics of 30 uniforms
    # average 25.5/31 and 5.5/31 of the range (order statistics, common
    # practice), so E[high-low] = 2 x 0.028 x 20/31 = 0.0361; its noise is
    # 0.01 sqrt(2/10) / sqrt(12) = 0.0013 over 12 months; band 5 of those
    # (measured 0.0341)
    assert hml == pytest.approx(2 * 0.028 * 20 / 31, abs=5 * 0.01 * np.sqrt(0.2 / 12))
    val = out.tables[4].frame.row(0, named=True)
    assert val["rmse"] == 0.0 and val["mean_cs_pearson"] == pytest.approx(1.0)
    assert set(out.series) == {"sort_s", "sort_d", "liquidity_factor"}


def test_demo_market_premium_has_the_planted_sign():
    # The demo's planted premium: E[r_{t+1}] = 0.005 + 2 * spread_t (demo_data/README.md).
    # Through the real chain (bars -> Roll spread -> panel -> Fama-MacBeth) the
    # estimated slope on the Roll spread must be positive, as planted.
    trades = pl.scan_parquet(DEMO / "trades.parquet").filter(pl.col("true_sign") != 0)
    daily = daily_bars(trades, timezone="America/New_York")
    monthly = compute_monthly(daily, {"roll_spread": {"convention": "zero"}})
    panel = build_panel(monthly.lazy(), returns=read_monthly_returns(str(DEMO / "returns.parquet")))
    out = run_models(panel, {"regressions": [{"name": "r", "regressors": ["roll_spread"], "lags": 4}]})
    slope = out.regressions_long.filter(pl.col("variable") == "roll_spread")["coef"][0]
    assert slope > 0
