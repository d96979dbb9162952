"""Roll (1984) spread: autocovariances, conventions, recovery of known truth."""

import math
from datetime import date, timedelta

import numpy as np
import polars as pl
import pytest
from statsmodels.tsa.stattools import acovf

from liqpanel.bars import add_returns
from liqpanel.measures.roll import roll_spread


def _daily_from_log_prices(log_prices: np.ndarray, month=date(2021, 1, 1)) -> pl.DataFrame:
    """A daily table for one security-month per row of ``log_prices``."""
    n_sec, n_days = log_prices.shape
    days = [month + timedelta(days=i) for i in range(n_days)]
    frame = pl.DataFrame(
        {
            "security": np.repeat([f"S{i:03d}" for i in range(n_sec)], n_days),
            "date": days * n_sec,
            "close": np.exp(log_prices).ravel(),
        }
    ).with_columns(pl.lit(month).alias("month"))
    return add_returns(frame.lazy()).collect()


def test_autocovariances_match_statsmodels_acovf():
    # reference library: statsmodels.tsa.stattools.acovf (demeaned, divisor n)
    rng = np.random.default_rng(1)
    logp = np.cumsum(rng.normal(0, 0.02, size=(5, 22)), axis=1)
    daily = _daily_from_log_prices(logp)
    out = roll_spread(daily.lazy(), convention="signed").collect().sort("security")
    for i, row in enumerate(out.iter_rows(named=True)):
        dp = np.diff(logp[i])
        g = acovf(dp, nlag=1, demean=True, fft=False)
        expected = 2 * math.sqrt(-g[1]) if g[1] < 0 else -2 * math.sqrt(g[1])
        assert row["roll_spread"] == pytest.approx(expected, rel=1e-10)
        assert row["roll_efficient_var"] == pytest.approx(g[0] + 2 * g[1], rel=1e-10)
        assert row["n_obs"] == 21


def test_conventions_for_non_negative_autocovariance():
    # a trending zig-free series: dp = 1, 2, 1, 2, ... has gamma1 < 0; dp = 1,1,2,2,... has gamma1 > 0
    dp = np.array([0.01, 0.01, 0.02, 0.02] * 5)
    logp = np.concatenate([[0.0], np.cumsum(dp)])[None, :]
    daily = _daily_from_log_prices(logp).lazy()
    g1 = acovf(dp, nlag=1, fft=False)[1]
    assert g1 > 0
    missing = roll_spread(daily, convention="missing").collect().row(0, named=True)
    zero = roll_spread(daily, convention="zero").collect().row(0, named=True)
    signed = roll_spread(daily, convention="signed").collect().row(0, named=True)
    assert missing["roll_spread"] is None and missing["reason"] == "non_negative_autocovariance"
    assert zero["roll_spread"] == 0.0
    assert signed["roll_spread"] == pytest.approx(-2 * math.sqrt(g1), rel=1e-9)


def test_recovers_a_known_spread_on_roll_model_prices():
    # Roll (1984): p_t = m_t + c q_t gives gamma1 = -c^2, so 2 sqrt(-gamma1) = 2c.
    # 400 series of 250 days each (n = 249 price changes).
    rng = np.random.default_rng(7)
    n_sec, n_days, c, sigma = 400, 250, 0.01, 0.01
    m = np.cumsum(rng.normal(0, sigma, size=(n_sec, n_days)), axis=1)
    q = rng.choice([-1.0, 1.0], size=(n_sec, n_days))
    daily = _daily_from_log_prices(m + c * q)
    out = roll_spread(daily.lazy(), series="log_price", convention="zero").collect()
    # Bands derived from the model: gamma0 = sigma^2 + 2c^2, gamma1 = -c^2, and
    # Bartlett's formula for sample autocovariances (from memory) gives
    # Var(g1) = (gamma0^2 + 3 gamma1^2) / n, Var(g0 + 2 g1) = 2 (gamma0^2 + 2 gamma1^2) / n
    # + 4 Var(g1) + 4 Cov(g0, g1) with Cov(g0, g1) = 4 gamma0 gamma1 / n (the
    # last two cancel here). By the delta method sd(2 sqrt(-g1)) = sd(g1) / c
    # = 0.0022 per series (measured 0.0019) and sd(g0 + 2 g1) = 3.0e-5
    # (measured 2.9e-5); each mean over 400 series is held to 4 standard errors,
    # the spread's band widened by its second-order (Jensen) bias
    # sd(g1)^2 / (4 c^3) = 1.2e-4. Measured: 0.019928 and 9.966e-5.
    n, gamma0, gamma1 = n_days - 1, sigma**2 + 2 * c**2, -(c**2)
    var_g1 = (gamma0**2 + 3 * gamma1**2) / n
    se_spread = math.sqrt(var_g1) / c / math.sqrt(n_sec)
    jensen = var_g1 / (4 * c**3)
    assert out["roll_spread"].mean() == pytest.approx(2 * c, abs=4 * se_spread + jensen)
    # implied efficient variance sigma_u^2 = gamma0 + 2 gamma1 (Roll 1984)
    var_g0 = 2 * (gamma0**2 + 2 * gamma1**2) / n
    cov_g0_g1 = 4 * gamma0 * gamma1 / n
    se_var = math.sqrt((var_g0 + 4 * var_g1 + 4 * cov_g0_g1) / n_sec)
    assert out["roll_efficient_var"].mean() == pytest.approx(sigma**2, abs=4 * se_var)


def test_returns_chain_across_month_partitions():
    # the first return of a month uses the previous month's last close
    prev = pl.DataFrame({"security": ["A"], "date": [date(2021, 1, 29)], "close": [10.0]})
    cur = pl.DataFrame({"security": ["A", "A"], "date": [date(2021, 2, 1), date(2021, 2, 2)], "close": [11.0, 12.1]})
    out = add_returns(cur.lazy(), prev.lazy()).collect()
    assert out["ret"].to_list() == pytest.approx([0.1, 0.1])
    alone = add_returns(cur.lazy()).collect()
    assert alone["ret"][0] is None
