"""Close-to-close and range volatility: Parkinson (1980), Garman & Klass (1980),
Rogers & Satchell (1991), Yang & Zhang (2000).

The range estimators are unbiased for the variance of a Brownian motion observed
continuously over the trading hours (each paper's main result). The tests
simulate such a path with numpy: a fine grid within each day, and on each grid
step the exact law of the maximum and minimum of a Brownian bridge,
max = (a + b + sqrt((b - a)^2 - 2 s^2 ln U)) / 2 (Glasserman 2004, "Monte Carlo
Methods in Financial Engineering", section 6.4; from memory), so that the daily
high and low carry no discretisation bias.
"""

from __future__ import annotations

import datetime as dt
import math

import numpy as np
import polars as pl
import pytest

from liqpanel.measures.volatility import (
    PARKINSON_CONSTANT,
    close_to_close_volatility,
    garman_klass_volatility,
    parkinson_volatility,
    rogers_satchell_volatility,
    yang_zhang_volatility,
)

ESTIMATORS = {
    "vol_close": close_to_close_volatility,
    "vol_parkinson": parkinson_volatility,
    "vol_garman_klass": garman_klass_volatility,
    "vol_rogers_satchell": rogers_satchell_volatility,
    "vol_yang_zhang": yang_zhang_volatility,
}


def brownian_ohlc(sigma, months, days, steps, seed, drift=0.0, overnight=0.0):
    """Log open, high, low, close of a Brownian motion, arrays of shape (months, days).

    Trading-hours variance sigma^2 and drift ``drift`` per day; between days an
    overnight move N(0, overnight * sigma^2).
    """
    rng = np.random.default_rng(seed)
    step_var = sigma**2 / steps
    intraday = np.cumsum(rng.normal(drift / steps, math.sqrt(step_var), size=(months, days, steps)), axis=2)
    gaps = rng.normal(0.0, sigma * math.sqrt(overnight), size=(months, days))
    day_moves = intraday[:, :, -1]
    before = np.concatenate([np.zeros((months, 1)), np.cumsum(day_moves, axis=1)[:, :-1]], axis=1)
    opens = np.cumsum(gaps, axis=1) + before
    path = opens[:, :, None] + np.concatenate([np.zeros((months, days, 1)), intraday], axis=2)
    a, b = path[:, :, :-1], path[:, :, 1:]
    spread = (b - a) ** 2
    highs = (a + b + np.sqrt(spread - 2.0 * step_var * np.log(rng.random(a.shape)))) / 2.0
    lows = (a + b - np.sqrt(spread - 2.0 * step_var * np.log(rng.random(a.shape)))) / 2.0
    return opens, highs.max(axis=2), lows.min(axis=2), path[:, :, -1]


def daily_table(o, h, l, c) -> pl.LazyFrame:
    """One security per row of the arrays, its days in January 2021 (prices from log prices)."""
    months, days = o.shape
    dates = np.busday_offset("2021-01-04", np.arange(days), roll="forward")
    close = np.exp(c)
    ret = np.concatenate([np.full((months, 1), np.nan), close[:, 1:] / close[:, :-1] - 1.0], axis=1)
    return (
        pl.DataFrame(
            {
                "security": np.repeat([f"B{m:04d}" for m in range(months)], days),
                "date": np.tile(dates, months),
                "open": np.exp(o).ravel(),
                "high": np.exp(h).ravel(),
                "low": np.exp(l).ravel(),
                "close": close.ravel(),
                "ret": ret.ravel(),
            }
        )
        .with_columns(pl.col("ret").fill_nan(None), pl.lit(dt.date(2021, 1, 1)).alias("month"))
        .lazy()
    )


def mean_variance(function, table) -> float:
    """Mean over security-months of the estimated daily variance (squared volatility)."""
    out = function(table).collect()
    return float((out.select(pl.nth(2)).to_series() ** 2).mean())


SIGMA = 0.02


@pytest.fixture(scope="module")
def driftless():
    return brownian_ohlc(SIGMA, months=400, days=21, steps=200, seed=2)


def test_parkinson_constant(driftless):
    # Parkinson (1980): E[(h - l)^2] = 4 ln 2 sigma^2 for a driftless Brownian motion.
    assert PARKINSON_CONSTANT == pytest.approx(4.0 * math.log(2.0), rel=1e-15)
    o, h, l, c = driftless
    assert np.mean((h - l) ** 2) / SIGMA**2 == pytest.approx(4.0 * math.log(2.0), rel=0.03)


@pytest.mark.parametrize(
    "name, band",
    [
        ("vol_close", 0.06),  # sampling sd of the variance about 1.6% (8,000 returns)
        ("vol_parkinson", 0.04),  # Parkinson (1980): unbiased; measured 0.99
        ("vol_garman_klass", 0.03),  # Garman & Klass (1980): unbiased; measured 1.00
        ("vol_rogers_satchell", 0.03),  # Rogers & Satchell (1991): unbiased; measured 1.00
        ("vol_yang_zhang", 0.03),  # Yang & Zhang (2000): unbiased; measured 1.00
    ],
)
def test_unbiased_for_brownian_variance(driftless, name, band):
    variance = mean_variance(ESTIMATORS[name], daily_table(*driftless))
    assert variance / SIGMA**2 == pytest.approx(1.0, abs=band)


def test_overnight_move_enters_whole_day_estimators_only():
    # Overnight variance 0.5 sigma^2: close-to-close and Yang & Zhang (2000)
    # measure the whole day (1.5 sigma^2); Parkinson, Garman-Klass and
    # Rogers-Satchell the trading hours only (sigma^2).
    table = daily_table(*brownian_ohlc(SIGMA, months=400, days=21, steps=200, seed=3, overnight=0.5))
    assert mean_variance(close_to_close_volatility, table) / SIGMA**2 == pytest.approx(1.5, abs=0.09)
    assert mean_variance(yang_zhang_volatility, table) / SIGMA**2 == pytest.approx(1.5, abs=0.05)
    for function in (parkinson_volatility, garman_klass_volatility, rogers_satchell_volatility):
        assert mean_variance(function, table) / SIGMA**2 == pytest.approx(1.0, abs=0.04)


def test_drift_independence():
    # Rogers & Satchell (1991) and Yang & Zhang (2000) are drift-independent;
    # Parkinson (1980) and Garman & Klass (1980) assume no drift and are biased
    # up by it (drift 3% a day against 2% volatility: measured 1.85x and 1.30x).
    table = daily_table(*brownian_ohlc(SIGMA, months=400, days=21, steps=200, seed=4, drift=0.03))
    assert mean_variance(rogers_satchell_volatility, table) / SIGMA**2 == pytest.approx(1.0, abs=0.03)
    assert mean_variance(yang_zhang_volatility, table) / SIGMA**2 == pytest.approx(1.0, abs=0.03)
    assert mean_variance(parkinson_volatility, table) / SIGMA**2 > 1.5
    assert mean_variance(garman_klass_volatility, table) / SIGMA**2 > 1.2


def test_hand_computed_three_days():
    # Each formula evaluated with plain Python math on three days of one month.
    rows = [  # open, high, low, close
        (100.0, 103.0, 99.0, 102.0),
        (101.0, 104.0, 100.5, 100.8),
        (101.5, 102.0, 97.0, 98.0),
    ]
    table = pl.DataFrame(
        {
            "security": ["ALFA"] * 3,
            "date": [dt.date(2021, 3, 1), dt.date(2021, 3, 2), dt.date(2021, 3, 3)],
            "month": [dt.date(2021, 3, 1)] * 3,
            "open": [r[0] for r in rows],
            "high": [r[1] for r in rows],
            "low": [r[2] for r in rows],
            "close": [r[3] for r in rows],
            "ret": [None, 100.8 / 102.0 - 1.0, 98.0 / 100.8 - 1.0],
        }
    ).lazy()
    logs = [tuple(math.log(x) for x in r) for r in rows]
    ln2 = math.log(2.0)
    # Parkinson (1980)
    parkinson = sum((h - l) ** 2 for o, h, l, c in logs) / 3 / (4 * ln2)
    # Garman & Klass (1980)
    garman_klass = sum(0.5 * (h - l) ** 2 - (2 * ln2 - 1) * (c - o) ** 2 for o, h, l, c in logs) / 3
    # Rogers & Satchell (1991)
    rs = [(h - c) * (h - o) + (l - c) * (l - o) for o, h, l, c in logs]
    rogers_satchell = sum(rs) / 3
    # close-to-close: sample variance of the two log returns
    x = [math.log(100.8 / 102.0), math.log(98.0 / 100.8)]
    close = sum((v - sum(x) / 2) ** 2 for v in x) / 1
    # Yang & Zhang (2000) on the two days with a previous close in the month
    n = 2
    over = [logs[t][0] - logs[t - 1][3] for t in (1, 2)]
    open_close = [logs[t][3] - logs[t][0] for t in (1, 2)]
    k = 0.34 / (1.34 + (n + 1) / (n - 1))

    def sample_var(v):
        m = sum(v) / len(v)
        return sum((a - m) ** 2 for a in v) / (len(v) - 1)

    yang_zhang = sample_var(over) + k * sample_var(open_close) + (1 - k) * (rs[1] + rs[2]) / 2
    expected = {
        "vol_close": (close, 2),
        "vol_parkinson": (parkinson, 3),
        "vol_garman_klass": (garman_klass, 3),
        "vol_rogers_satchell": (rogers_satchell, 3),
        "vol_yang_zhang": (yang_zhang, 2),
    }
    for name, function in ESTIMATORS.items():
        out = function(table).collect()
        variance, n_obs = expected[name]
        assert out[name][0] == pytest.approx(math.sqrt(variance), rel=1e-12)
        assert out["n_obs"][0] == n_obs
        assert out["reason"][0] is None


def test_annualise_scales_by_square_root_of_trading_days(driftless):
    # Common practice: annual variance = daily variance x trading days.
    table = daily_table(*(a[:5] for a in driftless))
    for name, function in ESTIMATORS.items():
        daily = function(table).collect()[name].to_numpy()
        yearly = function(table, annualise=True).collect()[name].to_numpy()
        custom = function(table, annualise=True, trading_days=250).collect()[name].to_numpy()
        np.testing.assert_allclose(yearly, daily * math.sqrt(252), rtol=1e-12)
        np.testing.assert_allclose(custom, daily * math.sqrt(250), rtol=1e-12)


def test_single_day_month():
    table = pl.DataFrame(
        {
            "security": ["BETA"], "date": [dt.date(2021, 3, 1)], "month": [dt.date(2021, 3, 1)],
            "open": [10.0], "high": [10.5], "low": [9.5], "close": [10.2], "ret": [0.01],
        }
    ).lazy()
    assert close_to_close_volatility(table).collect()["reason"][0] == "too_few_observations"
    assert yang_zhang_volatility(table).collect()["reason"][0] == "too_few_observations"
    assert parkinson_volatility(table).collect()["vol_parkinson"][0] == pytest.approx(
        math.log(10.5 / 9.5) / math.sqrt(4 * math.log(2))
    )


def test_recovery_on_market_simulator():
    # Project simulator, Roll model with 200 trades a day, daily volatility 2%.
    # No spread: close-to-close is unbiased; the range estimators see only the
    # trades, so the observed range is shorter than the true one and they are
    # biased down (Parkinson 1980 and Garman & Klass 1980 discuss this
    # discreteness bias); measured 0.85-0.89 of the variance.
    # Half-spread 1%: the close-to-close variance is sigma^2 + 2 c^2 (Roll 1984).
    simulate = pytest.importorskip("liqpanel.simulate")
    from liqpanel.bars import daily_bars

    n = 150
    clean = simulate.simulate_security_months(np.zeros(n), np.full(n, SIGMA), np.full(n, 200.0), n_days=21, seed=31)
    daily = daily_bars(clean.trades.lazy(), "America/New_York")
    assert mean_variance(close_to_close_volatility, daily) / SIGMA**2 == pytest.approx(1.0, abs=0.08)
    for function in (parkinson_volatility, garman_klass_volatility, rogers_satchell_volatility, yang_zhang_volatility):
        ratio = mean_variance(function, daily) / SIGMA**2
        assert 0.75 < ratio < 0.98
    c = 0.01
    bounce = simulate.simulate_security_months(np.full(n, c), np.full(n, SIGMA), np.full(n, 200.0), n_days=21, seed=32)
    daily = daily_bars(bounce.trades.lazy(), "America/New_York")
    assert mean_variance(close_to_close_volatility, daily) == pytest.approx(SIGMA**2 + 2 * c**2, rel=0.08)  # measured 0.97
