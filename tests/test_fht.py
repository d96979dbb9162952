"""Fong, Holden & Trzcinka (2017) spread: the formula, its identities, recovery of a known band."""

import math
from datetime import date, timedelta

import numpy as np
import polars as pl
import pytest
from scipy.stats import norm

from liqpanel.measures.zeros import fht_spread


def _daily(returns: np.ndarray, month=date(2021, 1, 1)) -> pl.DataFrame:
    """One security-month per row of ``returns`` (days one calendar day apart, one month label)."""
    n_sec, n_days = returns.shape
    return pl.DataFrame({
        "security": np.repeat([f"S{i:04d}" for i in range(n_sec)], n_days),
        "date": [month + timedelta(days=i) for i in range(n_days)] * n_sec,
        "month": [month] * (n_sec * n_days),
        "ret": returns.ravel(),
        "volume": np.ones(n_sec * n_days),
    })


def test_formula_matches_scipy_normal_quantile():
    # reference library: scipy.stats.norm.ppf; FHT = 2 sigma Phi^{-1}((1 + z) / 2) (Fong, Holden & Trzcinka 2017, from memory)
    rng = np.random.default_rng(3)
    r = rng.normal(0, 0.02, size=(4, 21))
    r[:, ::3] = 0.0  # 7 of 21 zero returns
    out = fht_spread(_daily(r).lazy(), calendar="security").collect().sort("security")
    for i, row in enumerate(out.iter_rows(named=True)):
        z = np.mean(r[i] == 0)
        expected = 2 * np.std(r[i], ddof=1) * norm.ppf((1 + z) / 2)
        assert row["fht_spread"] == pytest.approx(expected, rel=1e-10)
        assert row["fht_zero_share"] == pytest.approx(1 / 3)
        assert row["n_obs"] == 21


def test_identities_no_zeros_gives_zero_and_half_zeros_gives_the_quartile():
    # z = 0: Phi^{-1}(1/2) = 0; z = 1/2: Phi^{-1}(3/4) = 0.6745 (standard normal table)
    rng = np.random.default_rng(4)
    r = rng.normal(0, 0.01, size=(2, 20))
    r[1, :10] = 0.0
    out = fht_spread(_daily(r).lazy(), calendar="security").collect().sort("security")
    assert out["fht_spread"][0] == 0.0
    assert out["fht_spread"][1] == pytest.approx(2 * np.std(r[1], ddof=1) * 0.6744897501960817, rel=1e-9)


def test_days_without_trades_count_as_zero_returns_on_the_market_calendar():
    # security B has no row on two of the market's days: they are zero returns, as in zero_return_share
    days = [date(2021, 1, 4) + timedelta(days=i) for i in range(6)]
    ra = [0.01, -0.02, 0.0, 0.015, -0.01, 0.02]
    rb = [0.01, -0.02, 0.015, 0.02]
    frame = pl.DataFrame({
        "security": ["A"] * 6 + ["B"] * 4,
        "date": days + [days[0], days[1], days[4], days[5]],
        "month": [date(2021, 1, 1)] * 10,
        "ret": ra + rb,
        "volume": [1.0] * 10,
    })
    out = fht_spread(frame.lazy()).collect().sort("security")
    b = np.array(rb + [0.0, 0.0])
    assert out["fht_zero_share"][1] == pytest.approx(2 / 6)
    assert out["fht_spread"][1] == pytest.approx(2 * np.std(b, ddof=1) * norm.ppf((1 + 2 / 6) / 2), rel=1e-10)
    assert out["n_obs"].to_list() == [6, 6]


def test_all_zero_returns_are_missing_with_a_reason():
    out = fht_spread(_daily(np.zeros((1, 21))).lazy(), calendar="security").collect()
    assert out["fht_spread"][0] is None and out["reason"][0] == "all_returns_zero"


def test_recovers_a_known_band_of_zero_returns():
    # Known truth: r* ~ N(0, sigma^2) and the observed return is 0 when |r*| < S / 2 (the model behind
    # Fong, Holden & Trzcinka 2017). Long windows (2,000 days) isolate the estimator's large-sample bias:
    # sigma of the observed returns is smaller than sigma by the variance inside the band,
    # E[x^2; |x| < 0.5] = 0.0308 for S / sigma = 1 (normal integral), so the estimate is
    # S sqrt(1 - 0.0308) = 0.984 S. Tolerance 3% of S: that bias plus about 4 standard errors
    # of the mean of 20 windows (measured over 200 windows: sd of one estimate 2.8% of S, mean 0.982 S).
    rng = np.random.default_rng(11)
    sigma, spread = 0.02, 0.02
    star = rng.normal(0, sigma, size=(20, 2000))
    observed = np.where(np.abs(star) < spread / 2, 0.0, star)
    out = fht_spread(_daily(observed).lazy(), calendar="security").collect()
    assert out["fht_zero_share"].mean() == pytest.approx(2 * norm.cdf(0.5) - 1, abs=0.01)
    assert out["fht_spread"].mean() == pytest.approx(spread * math.sqrt(1 - 0.0308), rel=0.03)
