"""Commonality in liquidity (Chordia, Roll & Subrahmanyam 2000).

Checks: the market change without the security, worked by hand; one
security's regression against statsmodels' OLS on regressors built here
with plain numpy; recovery of planted commonality slopes from liquidity
changes simulated here with the truth known.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import polars as pl
import pytest
import statsmodels.api as sm

from liqpanel.core.errors import InputError
from liqpanel.factors.commonality import commonality_regressions, commonality_summary, liquidity_changes

MONTHS = pl.date_range(dt.date(2001, 1, 1), dt.date(2010, 12, 1), "1mo", eager=True).to_list()


def test_changes_by_hand():
    panel = pl.DataFrame({
        "security": ["A", "A", "A", "B", "B"],
        "month": [MONTHS[0], MONTHS[1], MONTHS[3], MONTHS[0], MONTHS[1]],
        "spread": [0.010, 0.012, 0.020, 0.020, 0.015],
    })
    prop = liquidity_changes(panel, "spread")
    # A: 0.012/0.010 - 1 = 0.2 (month 2); month 4 has no month 3 before it; B: 0.015/0.020 - 1 = -0.25
    assert prop.get_column("d").to_list() == pytest.approx([0.2, -0.25], abs=1e-12)
    diff = liquidity_changes(panel, "spread", "difference")
    assert diff.get_column("d").to_list() == pytest.approx([0.002, -0.005], abs=1e-12)
    with pytest.raises(InputError, match="no measure 'depth'"):
        liquidity_changes(panel, "depth")


def _planted(n_sec: int = 120, n_months: int = 60, seed: int = 99):
    """D_i,t = beta_i M_t + e_i,t: a common liquidity shock M ~ N(0, 0.1^2) with
    slopes beta_i ~ U(0.5, 1.5) (mean 1), idiosyncratic e ~ N(0, 0.1^2)."""
    rng = np.random.default_rng(seed)
    common = rng.normal(0.0, 0.1, n_months)
    beta = rng.uniform(0.5, 1.5, n_sec)
    d = beta[:, None] * common[None, :] + rng.normal(0.0, 0.1, (n_sec, n_months))
    changes = pl.DataFrame({
        "security": np.repeat([f"S{i:03d}" for i in range(n_sec)], n_months),
        "month": MONTHS[:n_months] * n_sec,
        "d": d.ravel(),
    })
    return changes, beta, d


def test_one_security_equals_statsmodels():
    changes, _, d = _planted(n_sec=8, n_months=40)
    market = pl.DataFrame({"month": MONTHS[:40], "mkt": np.random.default_rng(4).normal(0.01, 0.04, 40)})
    fits = commonality_regressions(changes, market, min_months=20)
    # reference regressors built with plain numpy: mean of the other securities, lead and lag
    i = 3
    others = (d.sum(axis=0) - d[i]) / (d.shape[0] - 1)
    m = market.get_column("mkt").to_numpy()
    rows = np.arange(1, 39)
    x = np.column_stack([others[rows - 1], others[rows], others[rows + 1], m[rows - 1], m[rows], m[rows + 1]])
    ref = sm.OLS(d[i, rows], sm.add_constant(x)).fit()
    got = fits.filter(pl.col("security") == "S003").row(0, named=True)
    names = ["intercept", "dm_lag", "dm", "dm_lead", "mkt_lag", "mkt", "mkt_lead"]
    assert [got[f"coef_{n}"] for n in names] == pytest.approx(list(ref.params), abs=1e-10)
    assert [got[f"se_{n}"] for n in names] == pytest.approx(list(ref.bse), abs=1e-10)
    assert got["adj_r2"] == pytest.approx(ref.rsquared_adj, abs=1e-10)
    assert got["n_obs"] == 38


def test_planted_commonality_is_recovered():
    changes, beta, _ = _planted()
    fits = commonality_regressions(changes, None, min_months=30)
    summary = commonality_summary(fits)
    # The market change without security i is M_t plus the mean of 119 noises:
    # its variance share is 0.1^2/119 against var(M) 0.01, an attenuation under 1%.
    # The cross-sectional mean of b_i then estimates mean(beta) (about 1) with
    # sampling error sd(b_i - beta_i) / sqrt(N): se of each slope is about
    # 0.1 / (sqrt(58) 0.1) = 0.13, so 0.13 / sqrt(120) = 0.012; four of those bound it.
    assert summary["mean_concurrent"] == pytest.approx(beta.mean(), abs=4 * 0.13 / np.sqrt(120) + 0.01)
    # lead and lag carry nothing in the planted model: their means are within the same bound of 0
    assert abs(summary["mean_lag"]) < 4 * 0.13 / np.sqrt(120)
    assert abs(summary["mean_lead"]) < 4 * 0.13 / np.sqrt(120)
    # every planted slope is at least 0.5, about four standard errors: nearly all positive and significant
    assert summary["share_positive"] == 1.0
    assert summary["share_positive_significant"] > 0.9
    assert summary["n_securities"] == 120


def test_daily_changes_step_over_the_weekend():
    # Daily changes are from the previous trading day in the table (Friday before Monday),
    # not the previous calendar day (Chordia, Roll & Subrahmanyam 2000 use trading days).
    fri, mon, tue = dt.date(2021, 3, 5), dt.date(2021, 3, 8), dt.date(2021, 3, 9)
    daily = pl.DataFrame({
        "security": ["A", "A", "A", "B", "B"],
        "date": [fri, mon, tue, fri, tue],
        "effective_spread": [0.010, 0.015, 0.012, 0.020, 0.030],
    })
    got = liquidity_changes(daily, "effective_spread", time="date")
    # A: Mon 0.015/0.010 - 1 = 0.5, Tue 0.012/0.015 - 1 = -0.2; B has no Monday, so no Tuesday change
    assert got.select("security", "date").rows() == [("A", mon), ("A", tue)]
    assert got.get_column("d").to_list() == pytest.approx([0.5, -0.2], abs=1e-12)


def test_daily_regressions_equal_the_monthly_ones_on_the_same_numbers():
    # The same numbers dated by trading day or by month give the same fits (the period
    # numbering is the only difference between the two paths).
    changes, _, _ = _planted(n_sec=6, n_months=30)
    days = pl.date_range(dt.date(2021, 1, 1), dt.date(2021, 12, 31), "1d", eager=True).filter(
        pl.date_range(dt.date(2021, 1, 1), dt.date(2021, 12, 31), "1d", eager=True).dt.weekday() <= 5
    ).head(30)
    as_days = changes.join(pl.DataFrame({"month": MONTHS[:30], "date": days}), on="month").drop("month")
    monthly = commonality_regressions(changes, None, min_months=20)
    daily = commonality_regressions(as_days, None, min_months=20, time="date")
    np.testing.assert_allclose(daily["coef_dm"].to_numpy(), monthly["coef_dm"].to_numpy(), rtol=0, atol=1e-12)
