"""Closing percent quoted spread (Chung & Zhang 2014): worked values, filters, recovery of a known spread."""

from datetime import date, timedelta

import numpy as np
import polars as pl
import pytest

from liqpanel.measures.closing import closing_spread


def _daily(bid, ask, n_sec=1):
    bid, ask = np.asarray(bid, float).reshape(n_sec, -1), np.asarray(ask, float).reshape(n_sec, -1)
    days = bid.shape[1]
    return pl.DataFrame({
        "security": np.repeat([f"S{i:04d}" for i in range(n_sec)], days),
        "date": [date(2021, 1, 1) + timedelta(days=i) for i in range(days)] * n_sec,
        "month": [date(2021, 1, 1)] * bid.size,
        "close_bid": bid.ravel(), "close_ask": ask.ravel(),
    })


def test_worked_value_and_the_invalid_quotes_it_skips():
    # Chung & Zhang (2014): (ask - bid) / midpoint at the close, monthly mean; crossed, one-sided and
    # spreads above 50% of the midpoint are left out (from memory). Hand-computed.
    out = closing_spread(_daily([9.9, 19.8, 10.0, 0.0, 5.0], [10.1, 20.2, 9.9, 1.0, 9.0]).lazy()).collect()
    assert out["closing_spread"][0] == pytest.approx((0.2 / 10 + 0.4 / 20) / 2)
    assert out["n_obs"][0] == 2
    wide = closing_spread(_daily([5.0], [9.0]).lazy(), max_spread=None).collect()
    assert wide["closing_spread"][0] == pytest.approx(4 / 7)


def test_recovers_a_known_proportional_spread():
    # Known truth: quotes m (1 -+ s / 2) around a random-walk midpoint give (ask - bid) / mid = s exactly
    rng = np.random.default_rng(1)
    mid = 20 * np.exp(np.cumsum(rng.normal(0, 0.02, (50, 21)), axis=1))
    s = rng.uniform(0.001, 0.05, (50, 1))
    out = closing_spread(_daily(mid * (1 - s / 2), mid * (1 + s / 2), 50).lazy()).collect().sort("security")
    assert out["closing_spread"].to_numpy() == pytest.approx(s.ravel(), rel=1e-12)
