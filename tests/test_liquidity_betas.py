"""Rolling liquidity betas, portfolios on them and the traded factor (Pastor & Stambaugh 2003).

Checks: the stacked least-squares fits against statsmodels' OLS (the
reference library), and recovery of planted liquidity betas from returns
simulated here with known betas (the truth), with tolerances derived from
the OLS standard error.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import polars as pl
import pytest
import statsmodels.api as sm

from liqpanel.core.errors import InputError
from liqpanel.factors.betas import formation_betas, liquidity_betas, post_ranking_betas
from liqpanel.factors.ols import grouped_ols, rolling_ols
from liqpanel.factors.run import run_factors

MONTHS = pl.date_range(dt.date(2001, 1, 1), dt.date(2010, 12, 1), "1mo", eager=True).to_list()


def _planted(n_sec: int = 60, n_months: int = 100, seed: int = 2024, missing: float = 0.05):
    """r_i,t = 0.005 + bM_i mkt_t + bL_i L_t + e_i,t with known bM, bL; some returns missing.

    mkt ~ N(0.008, 0.045^2), L ~ N(0, 0.01^2), e ~ N(0, 0.05^2), bL_i evenly
    spread over [-3, 3], bM_i over [0.5, 1.5]. Invented values, chosen to look
    like monthly data.
    """
    rng = np.random.default_rng(seed)
    months = MONTHS[:n_months]
    mkt = rng.normal(0.008, 0.045, n_months)
    liq = rng.normal(0.0, 0.01, n_months)
    b_liq = np.linspace(-3.0, 3.0, n_sec)
    b_mkt = np.linspace(0.5, 1.5, n_sec)[rng.permutation(n_sec)]
    ret = 0.005 + b_mkt[:, None] * mkt[None, :] + b_liq[:, None] * liq[None, :] + rng.normal(0, 0.05, (n_sec, n_months))
    ret[rng.random(ret.shape) < missing] = np.nan
    names = [f"S{i:03d}" for i in range(n_sec)]
    returns = pl.DataFrame({
        "security": np.repeat(names, n_months), "month": months * n_sec, "ret": ret.ravel(),
    }).filter(pl.col("ret").is_not_nan())
    regressors = pl.DataFrame({"month": months, "mkt": mkt, "liq_innovation": liq})
    truth = pl.DataFrame({"security": names, "true_beta": b_liq})
    return returns, regressors, truth


def test_rolling_fit_equals_statsmodels_ols():
    returns, regressors, _ = _planted(n_sec=5, n_months=80)
    betas = liquidity_betas(returns, regressors, window=60, min_months=36)
    # reference: statsmodels OLS on the same security's last 60 months, missing returns dropped
    sec, last = "S003", MONTHS[79]
    rows = returns.filter((pl.col("security") == sec) & (pl.col("month") > MONTHS[19])).join(regressors, on="month")
    ref = sm.OLS(rows.get_column("ret").to_numpy(), sm.add_constant(rows.select("mkt", "liq_innovation").to_numpy())).fit()
    got = betas.filter((pl.col("security") == sec) & (pl.col("month") == last)).row(0, named=True)
    assert got["liq_beta"] == pytest.approx(ref.params[2], abs=1e-10)
    assert got["liq_beta_se"] == pytest.approx(ref.bse[2], abs=1e-10)
    assert got["n_months"] == rows.height


def test_grouped_and_rolling_r2_equal_statsmodels():
    returns, regressors, _ = _planted(n_sec=4, n_months=40)
    frame = returns.join(regressors, on="month")
    fits = grouped_ols(frame, "ret", ["mkt", "liq_innovation"], "security", min_obs=10)
    for sec in ("S000", "S002"):
        rows = frame.filter(pl.col("security") == sec)
        ref = sm.OLS(rows.get_column("ret").to_numpy(), sm.add_constant(rows.select("mkt", "liq_innovation").to_numpy())).fit()
        got = fits.filter(pl.col("security") == sec).row(0, named=True)
        assert [got["coef_intercept"], got["coef_mkt"], got["coef_liq_innovation"]] == pytest.approx(list(ref.params), abs=1e-10)
        assert [got["tstat_intercept"], got["tstat_mkt"], got["tstat_liq_innovation"]] == pytest.approx(list(ref.tvalues), abs=1e-8)
        assert got["r2"] == pytest.approx(ref.rsquared, abs=1e-10)
        assert got["adj_r2"] == pytest.approx(ref.rsquared_adj, abs=1e-10)
    # a window as long as the sample equals the full-sample fit
    grid = frame.sort("security", "month")
    rolled = rolling_ols(grid, "ret", ["mkt", "liq_innovation"], entity="security", time="month", window=40, min_obs=10)
    last = rolled.filter(pl.col("month") == MONTHS[39]).sort("security")
    np.testing.assert_allclose(last.get_column("coef_mkt").to_numpy(), fits.get_column("coef_mkt").to_numpy(), atol=1e-10)


def test_planted_betas_are_recovered():
    returns, regressors, truth = _planted()
    betas = liquidity_betas(returns, regressors, window=60, min_months=36)
    last = betas.filter(pl.col("month") == MONTHS[99]).join(truth, on="security")
    assert last.height == 60
    z = ((last.get_column("liq_beta") - last.get_column("true_beta")) / last.get_column("liq_beta_se")).to_numpy()
    # Under the model each z is t-distributed with about 54 degrees of freedom:
    # P(|z| > 4.5) < 1e-4, so over 60 securities no |z| should reach 4.5,
    # and the sd of 60 such draws lies in [0.7, 1.3] with probability > 0.99.
    assert np.abs(z).max() < 4.5
    assert 0.7 < z.std(ddof=1) < 1.3
    # expected se: sigma_e / (sqrt(n) sd(L)) = 0.05 / (sqrt(57) * 0.01) = 0.66 (n about 57 of 60 months)
    assert 0.45 < float(last.get_column("liq_beta_se").median()) < 0.9


def test_min_months_and_window_rules():
    returns, regressors, _ = _planted(n_sec=3, n_months=50, missing=0.0)
    betas = liquidity_betas(returns, regressors, window=24, min_months=20)
    assert betas.get_column("month").min() == MONTHS[19]  # the 20th month is the first with 20 returns
    assert betas.get_column("n_months").max() == 24
    with pytest.raises(InputError, match="larger than the window"):
        liquidity_betas(returns, regressors, window=12, min_months=20)


def test_annual_formation_holds_the_december_beta():
    betas = pl.DataFrame({
        "security": ["A"] * 3, "month": [dt.date(2003, 11, 1), dt.date(2003, 12, 1), dt.date(2004, 1, 1)],
        "liq_beta": [1.0, 2.0, 3.0],
    })
    held = formation_betas(betas, "annual")
    assert held.get_column("month").to_list() == pl.date_range(dt.date(2003, 12, 1), dt.date(2004, 11, 1), "1mo", eager=True).to_list()
    assert held.get_column("liq_beta").unique().to_list() == [2.0]
    assert formation_betas(betas, "monthly").get_column("liq_beta").to_list() == [1.0, 2.0, 3.0]


def _panel_from(returns: pl.DataFrame) -> pl.DataFrame:
    """A panel keyed by formation month: ret_next of month t is the return of t + 1."""
    return returns.select(
        "security", pl.col("month").dt.offset_by("-1mo"), pl.col("ret").alias("ret_next"),
        pl.lit(1e9).alias("market_cap"),
    )


def test_traded_factor_loads_on_planted_liquidity():
    # Sorting on estimated betas must spread the planted betas: the high-minus-low
    # portfolio's post-formation beta is positive, near the difference of the mean
    # planted betas of the top and bottom deciles (2.7 - (-2.7) = 5.4), shrunk by
    # estimation noise in the sort (beta se 0.66 against a spread sd of 1.7).
    returns, regressors, _ = _planted(n_sec=200, n_months=100, missing=0.0)
    betas = liquidity_betas(returns, regressors, window=60, min_months=36)
    panel = _panel_from(returns).join(betas.select("security", "month", "liq_beta"), on=["security", "month"], how="left")
    from liqpanel.models.sorts import sort_portfolios

    res = sort_portfolios(panel, on="liq_beta", n=10, min_securities=5, lags=4)
    series = res.hml_returns.select("month", pl.lit("high-low").alias("portfolio"), "ret")
    post = post_ranking_betas(series, regressors).row(0, named=True)
    assert 3.0 < post["coef_liq_innovation"] < 6.5
    assert post["tstat_liq_innovation"] > 3


def test_run_factors_builds_the_factor_file():
    returns, regressors, _ = _planted(n_sec=60, n_months=100, missing=0.0)
    rng = np.random.default_rng(1)
    panel = _panel_from(returns).with_columns(pl.Series("ps_gamma", rng.normal(0, 0.1, returns.height)))
    supplied = regressors.select("month", "mkt")
    out = run_factors(panel, {"aggregate": {}, "betas": {"window": 60, "min_months": 36, "rebalance": "annual",
                                                        "market": "mkt", "portfolios": 5}},
                      supplied=supplied, lags=4)
    assert [t.name for t in out.tables] == ["liquidity_aggregate", "liquidity_innovation_regression",
                                            "liquidity_beta_portfolios", "liquidity_traded_factor"]
    assert out.factors.columns == ["month", "liq_level", "liq_innovation", "liq_traded"]
    # every section at once, the betas on the market illiquidity innovation
    rich = panel.with_columns(pl.Series("amihud", rng.uniform(0.1, 5.0, panel.height)))
    every = run_factors(rich, {"aggregate": {}, "acharya_pedersen": {"portfolios": 5, "market": "mkt"},
                               "betas": {"innovation": "market_illiquidity", "market": "mkt", "portfolios": 5},
                               "commonality": {"measures": ["amihud"], "market": "mkt"}}, supplied=supplied, lags=4)
    assert {t.name for t in every.tables} >= {"liquidity_adjusted_betas", "liquidity_adjusted_capm",
                                               "liquidity_commonality", "liquidity_traded_factor"}
    assert every.factors.columns == ["month", "liq_level", "liq_innovation", "illiq_market", "illiq_innovation",
                                     "liq_traded"]
    assert out.factors.get_column("month").is_sorted() and out.factors.get_column("month").is_unique().all()
    with pytest.raises(InputError, match="no column"):
        run_factors(panel, {"aggregate": {}, "betas": {"market": "nope"}}, supplied=supplied)
    with pytest.raises(InputError, match="needs factors.aggregate"):
        run_factors(panel, {"betas": {}}, supplied=supplied)
    with pytest.raises(InputError, match="needs factors.acharya_pedersen"):
        run_factors(panel, {"aggregate": {}, "betas": {"innovation": "market_illiquidity"}}, supplied=supplied)
