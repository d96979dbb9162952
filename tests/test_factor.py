"""Liquidity factor: hand-worked factor returns, simulated truth, statsmodels alphas.

The hand-built panel below is a worked example of the construction (size
halves, liquidity tertiles within each half), not demo data.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import polars as pl
import pytest
import statsmodels.api as sm

from liqpanel.core.errors import InputError
from liqpanel.models import factor_summary, liquidity_factor

MONTHS = [dt.date(2012, 1, 1), dt.date(2012, 2, 1)]


def _hand_panel() -> pl.DataFrame:
    """Two months, 12 securities: 6 small (log_size 1..6), 6 big (7..12).

    Within each half, amihud ranks 1..6, so tertiles hold 2 securities each.
    Month 1: small illiquid tertile earns 5%, small liquid 2% (spread 3%);
    big illiquid 2%, big liquid 1% (spread 1%) -> factor (3% + 1%)/2 = 2%.
    Month 2: all returns 1% except small illiquid 0% -> factor (-1% + 0)/2 = -0.5%.
    """
    size = np.arange(1, 13, dtype=float)
    amihud = np.r_[np.arange(1, 7), np.arange(1, 7)].astype(float)
    tertile = np.r_[[1, 1, 2, 2, 3, 3], [1, 1, 2, 2, 3, 3]]
    small = size <= 6
    ret1 = np.where(small, np.select([tertile == 1, tertile == 2], [0.02, 0.03], 0.05),
                    np.select([tertile == 1, tertile == 2], [0.01, 0.015], 0.02))
    ret2 = np.where(small & (tertile == 3), 0.0, 0.01)
    return pl.DataFrame(
        {
            "security": [f"F{i:02d}" for i in range(12)] * 2,
            "month": [MONTHS[0]] * 12 + [MONTHS[1]] * 12,
            "log_size": np.r_[size, size],
            "amihud": np.r_[amihud, amihud],
            "ret_next": np.r_[ret1, ret2],
            "market_cap": np.exp(np.r_[size, size]),
        }
    )


def test_hand_built_factor_returns():
    factor = liquidity_factor(_hand_panel(), "amihud", n_size=2, n_liq=3, min_securities=1)
    assert factor.columns == ["month", "factor_ret"]
    assert factor.get_column("month").to_list() == MONTHS
    assert factor.get_column("factor_ret").to_list() == pytest.approx([0.02, -0.005])
    # Value weights give the same answer here: returns are equal within each cell.
    vw = liquidity_factor(_hand_panel(), "amihud", weight="market_cap", min_securities=1)
    assert vw.get_column("factor_ret").to_list() == pytest.approx([0.02, -0.005])
    # A measure where high means liquid (e.g. turnover) flips the sign.
    flipped = liquidity_factor(_hand_panel(), "amihud", min_securities=1, high_is_illiquid=False)
    assert flipped.get_column("factor_ret").to_list() == pytest.approx([-0.02, 0.005])
    # With min_securities = 3 every 2-member cell is thin: no factor months.
    assert liquidity_factor(_hand_panel(), "amihud", min_securities=3).height == 0


def _simulated(n_sec=300, n_months=120, premium=0.01, seed=21):
    """Simulation truth: ret_next = premium * 1[illiquid tertile within size half] + 0.005 * size + noise.

    Illiquidity is independent of size, so E[factor] = premium.
    """
    rng = np.random.default_rng(seed)
    n = n_sec * n_months
    size = rng.normal(size=n)
    amihud = rng.lognormal(size=n)
    months = [dt.date(2000 + m // 12, m % 12 + 1, 1) for m in range(n_months)]
    panel = pl.DataFrame(
        {"security": [f"S{i:03d}" for i in range(n_sec)] * n_months,
         "month": [m for m in months for _ in range(n_sec)],
         "log_size": size, "amihud": amihud, "noise": rng.normal(0, 0.06, n)}
    )
    third = pl.col("amihud").rank() / pl.len()
    half = (pl.col("log_size") > pl.col("log_size").median().over("month")).cast(pl.Int8)
    return panel.with_columns(half.alias("_half")).with_columns(
        (premium * (third.over("month", "_half") > 2 / 3).cast(pl.Float64) + 0.005 * pl.col("log_size")
         + pl.col("noise")).alias("ret_next")
    ).drop("_half", "noise")


def test_factor_recovers_known_premium():
    factor = liquidity_factor(_simulated(), "amihud")
    summary = factor_summary(factor, lags=3)
    # Truth 1% per month; se ~ 0.06 * sqrt(2/50) / sqrt(120) / sqrt(2) ~ 0.0008.
    assert abs(summary["mean"] - 0.01) < 4 * summary["std_error"]
    assert summary["n_months"] == 120
    values = factor.get_column("factor_ret").to_numpy()
    # Sharpe (1966) ratio, annualised: mean / sd * sqrt(12), sd with ddof = 1 (numpy).
    assert summary["sharpe_annual"] == pytest.approx(values.mean() / values.std(ddof=1) * np.sqrt(12), rel=1e-12)


def test_alpha_against_the_factor_itself_is_zero_with_beta_one():
    factor = liquidity_factor(_simulated(seed=4), "amihud")
    # Supplied factors are dated by the month they are earned (t + 1).
    supplied = factor.select(pl.col("month").dt.offset_by("1mo"), pl.col("factor_ret").alias("liq_copy"))
    summary = factor_summary(factor, supplied, lags=3)
    assert summary["alpha"] == pytest.approx(0.0, abs=1e-12)
    assert summary["betas"]["liq_copy"] == pytest.approx(1.0, abs=1e-12)
    assert summary["r2"] == pytest.approx(1.0, abs=1e-12)
    assert summary["n_months_alpha"] == factor.height
    # Dated like ret_next instead: same answer with factors_dated="formation_month".
    same = factor_summary(factor, factor.rename({"factor_ret": "liq_copy"}), lags=3, factors_dated="formation_month")
    assert same["betas"]["liq_copy"] == pytest.approx(1.0, abs=1e-12)
    # Wrong dating (no shift) pairs each month with the next one: beta is far from 1.
    misdated = factor_summary(factor, factor.rename({"factor_ret": "liq_copy"}), lags=3)
    # that slope is about the factor's first-order autocorrelation, near 0 for
    # these independent months (measured 0.16), so it lies far from 1
    assert abs(misdated["betas"]["liq_copy"] - 1.0) > 0.5


def test_alpha_matches_statsmodels_ols_with_hac():
    factor = liquidity_factor(_simulated(seed=9), "amihud")
    rng = np.random.default_rng(3)
    n = factor.height
    market = rng.normal(0.005, 0.04, n)
    other = rng.normal(0.0, 0.03, n)
    supplied = pl.DataFrame({"month": factor.get_column("month"), "market": market, "other": other}).with_columns(
        pl.col("month").dt.offset_by("1mo")
    )
    summary = factor_summary(factor, supplied, lags=4)
    # Jensen (1968) alpha; statsmodels OLS, HAC (Bartlett, maxlags=4, small-sample factor T/(T-k)).
    x = sm.add_constant(np.column_stack([market, other]))
    ref = sm.OLS(factor.get_column("factor_ret").to_numpy(), x).fit(
        cov_type="HAC", cov_kwds={"maxlags": 4, "use_correction": True}
    )
    assert summary["alpha"] == pytest.approx(ref.params[0], rel=1e-10)
    assert summary["alpha_std_error"] == pytest.approx(ref.bse[0], rel=1e-9)
    assert summary["alpha_tstat"] == pytest.approx(ref.tvalues[0], rel=1e-9)
    assert summary["betas"]["market"] == pytest.approx(ref.params[1], rel=1e-9)
    assert summary["beta_tstats"]["other"] == pytest.approx(ref.tvalues[2], rel=1e-9)
    assert summary["r2"] == pytest.approx(ref.rsquared, rel=1e-9)


def test_factor_summary_errors():
    factor = pl.DataFrame({"month": MONTHS, "factor_ret": [0.01, 0.02]})
    with pytest.raises(InputError, match="'factor_ret'"):
        factor_summary(factor.rename({"factor_ret": "ret"}))
    with pytest.raises(InputError, match="only 1 months match"):
        factor_summary(factor, pl.DataFrame({"month": [dt.date(2012, 2, 1)], "market": [0.01]}))
    with pytest.raises(ValueError, match="factors_dated"):
        factor_summary(factor, None, factors_dated="calendar")
