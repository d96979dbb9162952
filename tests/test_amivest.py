"""Amivest liquidity ratio: the two forms, the reciprocal of Amihud, recovery of a known depth."""

from datetime import date, timedelta

import numpy as np
import polars as pl
import pytest

from liqpanel.measures.activity import amihud_illiquidity, amivest_liquidity


def _daily(ret, dollar_volume, n_sec=1) -> pl.DataFrame:
    ret, dollar_volume = np.asarray(ret, float).reshape(n_sec, -1), np.asarray(dollar_volume, float).reshape(n_sec, -1)
    days = ret.shape[1]
    return pl.DataFrame({
        "security": np.repeat([f"S{i:04d}" for i in range(n_sec)], days),
        "date": [date(2021, 1, 1) + timedelta(days=i) for i in range(days)] * n_sec,
        "month": [date(2021, 1, 1)] * ret.size,
        "ret": ret.ravel(),
        "dollar_volume": dollar_volume.ravel(),
    }, nan_to_null=True)


def test_worked_values_of_both_forms():
    # mean of ratios (Goyenko, Holden & Trzcinka 2009, from memory): mean(DV / |r|) over days with r != 0 and DV > 0;
    # ratio of sums (Amihud, Mendelson & Lauterbach 1997, from memory): sum DV / sum |r|. Hand-computed values.
    daily = _daily([0.01, -0.02, 0.0, 0.04, None], [2e6, 4e6, 9e6, 2e6, 5e6]).lazy()
    mean_form = amivest_liquidity(daily).collect()
    assert mean_form["amivest"][0] == pytest.approx((200 + 200 + 50) / 3)
    assert mean_form["n_obs"][0] == 3
    sums = amivest_liquidity(daily, form="ratio_of_sums").collect()
    assert sums["amivest"][0] == pytest.approx(8 / 0.07)


def test_reciprocal_of_amihud_when_the_price_move_per_volume_is_constant():
    # identity: |r_t| = k DV_t on every day gives Amihud = k x 10^6 and Amivest = 1 / (k x 10^6), both in millions
    rng = np.random.default_rng(2)
    dv = rng.uniform(1e5, 1e7, 21)
    ret = 3e-9 * dv * rng.choice([-1, 1], 21)
    daily = _daily(ret, dv).lazy()
    amihud = amihud_illiquidity(daily).collect()["amihud"][0]
    assert amivest_liquidity(daily).collect()["amivest"][0] == pytest.approx(1 / amihud, rel=1e-12)


def test_recovers_a_known_depth():
    # Known truth: |r_t| = DV_t / (D e_t) with e_t lognormal(0, s^2), so E[DV / |r|] = D E[e] = D exp(s^2 / 2).
    # 2,000 months of 21 days; tolerance 2%: the standard error of the mean over 42,000 days is
    # sqrt(exp(s^2) - 1) / sqrt(42,000) = 0.26% of the truth for s = 0.5, so 2% is far outside noise.
    rng = np.random.default_rng(5)
    depth, s = 250.0, 0.5  # millions per unit return
    dv = rng.uniform(1e5, 1e7, (2000, 21))
    e = np.exp(rng.normal(0, s, dv.shape))
    ret = dv / (depth * 1e6 * e) * rng.choice([-1, 1], dv.shape)
    out = amivest_liquidity(_daily(ret, dv, 2000).lazy()).collect()
    assert out["amivest"].mean() == pytest.approx(depth * np.exp(s**2 / 2), rel=0.02)


def test_no_price_move_gives_a_reason():
    out = amivest_liquidity(_daily([0.0, 0.0], [1e6, 1e6]).lazy()).collect()
    assert out["amivest"][0] is None and out["reason"][0] == "no_price_moves"
