"""Effective tick (Holden 2009; Goyenko, Holden & Trzcinka 2009): the published formula, recovery of known clustering."""

from datetime import date, timedelta

import numpy as np
import polars as pl
import pytest

from liqpanel.measures import compute_monthly
from liqpanel.measures.ticks import class_shares, effective_tick


def _daily(close: np.ndarray, month=date(2021, 1, 1)) -> pl.DataFrame:
    n_sec, n_days = close.shape
    return pl.DataFrame({
        "security": np.repeat([f"S{i:04d}" for i in range(n_sec)], n_days),
        "date": [month + timedelta(days=i) for i in range(n_days)] * n_sec,
        "month": [month] * close.size,
        "close": close.ravel(),
        "volume": np.full(close.size, 100.0),
    })


def _published_halving(prices_in_ticks: np.ndarray, tick: float) -> float:
    """Goyenko, Holden & Trzcinka (2009) on the fractional grid 1/8, 1/4, 1/2, 1 (from memory).

    F_j: share of prices on odd eighths, odd quarters, odd halves, wholes; U_1 = 2 F_1,
    U_j = 2 F_j - F_{j-1} (j = 2, 3), U_4 = F_4 - F_3; gamma_j = min(max(U_j, 0), 1 - sum_{k<j} gamma_k);
    effective tick = sum_j gamma_j s_j / mean price.
    """
    k = prices_in_ticks
    cls = np.where(k % 8 == 0, 3, np.where(k % 4 == 0, 2, np.where(k % 2 == 0, 1, 0)))
    F = np.bincount(cls, minlength=4) / len(k)
    U = [2 * F[0], 2 * F[1] - F[0], 2 * F[2] - F[1], F[3] - F[2]]
    gamma = []
    for u in U:
        gamma.append(min(max(u, 0.0), 1.0 - sum(gamma)))
    return sum(g * s * tick for g, s in zip(gamma, (1, 2, 4, 8))) / np.mean(k * tick)


def test_reduces_to_the_published_formula_on_a_halving_grid():
    rng = np.random.default_rng(12)
    tick = 0.125
    for trial in range(5):
        k = rng.integers(80, 400, size=40) * rng.choice([1, 2, 4, 8], size=40, p=rng.dirichlet(np.ones(4)))
        out = effective_tick(_daily((k * tick)[None, :]).lazy(), tick_size=tick, multiples=[1, 2, 4, 8]).collect()
        assert out["effective_tick"][0] == pytest.approx(_published_halving(k, tick), rel=1e-12)


def test_class_shares_of_the_decimal_grid():
    # on a cent tick, of the nickels 8 in 20 are not dimes or quarters, 8 are dimes not quarters, 3 quarters
    # not dollars, 1 a dollar (counting over one dollar; common practice of decimal price grids)
    shares = class_shares((1, 5, 10, 25, 100))
    assert shares[:, 1] == pytest.approx([0, 0.4, 0.4, 0.15, 0.05])
    assert np.allclose(shares.sum(axis=0), 1.0)
    assert np.allclose(np.triu(shares, 1), 0.0)


def test_recovers_known_spread_probabilities_on_the_decimal_grid():
    # Known truth: each day the spread is 1, 5, 10, 25 or 100 cents with probabilities gamma and the close is
    # uniform on that spread's grid near a price of about 20; truth = sum gamma_j s_j / mean price.
    # 200 windows of 500 days; tolerance 5% of the truth for the mean over windows (measured on this design:
    # sd of one window's estimate 12% of the truth, so 0.9% for the mean of 200; mean ratio 1.014, the small
    # upward bias of the constraint that floors a negative U_j at zero).
    rng = np.random.default_rng(21)
    gamma = np.array([0.3, 0.3, 0.2, 0.15, 0.05])
    spreads = np.array([1, 5, 10, 25, 100])
    n_sec, n_days = 200, 500
    j = rng.choice(5, size=(n_sec, n_days), p=gamma)
    level = rng.uniform(1500, 2500, size=(n_sec, n_days))  # cents
    s = spreads[j]
    cents = np.floor(level / s + rng.random((n_sec, n_days))) * s
    out = effective_tick(_daily(cents / 100).lazy(), tick_size=0.01).collect()
    truth = (gamma * spreads).sum() / 100 / (cents / 100).mean(axis=1)
    assert out["effective_tick"].mean() == pytest.approx(truth.mean(), rel=0.05)
    assert out["n_obs"].min() == n_days


def test_without_a_tick_the_value_is_missing_with_a_reason():
    out = compute_monthly(_daily(np.full((1, 20), 20.0)).lazy(), {"effective_tick": {}})
    assert out["effective_tick"][0] is None
    assert out["effective_tick_reason"][0] == "no_tick_size"


def test_a_tick_that_changes_over_time_comes_from_a_daily_column():
    # half the month on a cent tick, half on a half-cent tick: the spreads are the multiples of the mean tick
    close = np.array([[20.01, 20.03, 20.05, 20.07, 20.005, 20.015, 20.025, 20.035]])
    daily = _daily(close).with_columns(pl.Series("tick_size", [0.01] * 4 + [0.005] * 4))
    out = effective_tick(daily.lazy(), tick_size="column").collect()
    fixed = effective_tick(daily.lazy(), tick_size=0.01).collect()
    assert out["n_obs"][0] == 8 and fixed["n_obs"][0] == 4  # half-cent closes are off the cent grid
    assert out["effective_tick"][0] > 0
