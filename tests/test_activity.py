"""Amihud (2002) illiquidity: a month computed by hand, missing days, units."""

from __future__ import annotations

import datetime as dt

import numpy as np
import polars as pl
import pytest

from liqpanel.measures import compute_monthly
from liqpanel.measures.activity import amihud_illiquidity

MARCH, APRIL = dt.date(2021, 3, 1), dt.date(2021, 4, 1)


def _daily(rows) -> pl.LazyFrame:
    """(security, date, ret, dollar_volume) rows as a daily table."""
    return pl.DataFrame(
        {
            "security": [r[0] for r in rows],
            "date": [r[1] for r in rows],
            "month": [r[1].replace(day=1) for r in rows],
            "ret": [r[2] for r in rows],
            "dollar_volume": [r[3] for r in rows],
        },
        schema_overrides={"ret": pl.Float64, "dollar_volume": pl.Float64},
    ).lazy()


# One invented security over five March days. Units: ret a proportion (0.02 =
# 2%), dollar volume in currency units of the market.
HAND = [
    ("sim-ABC", dt.date(2021, 3, 1), 0.02, 2_000_000.0),   # |r| / DV = 1.0e-8
    ("sim-ABC", dt.date(2021, 3, 2), -0.01, 500_000.0),    # 2.0e-8
    ("sim-ABC", dt.date(2021, 3, 3), 0.0, 1_000_000.0),    # 0
    ("sim-ABC", dt.date(2021, 3, 4), 0.05, 0.0),           # no volume: left out
    ("sim-ABC", dt.date(2021, 3, 5), None, 3_000_000.0),   # no return: left out
    ("sim-XYZ", dt.date(2021, 4, 1), 0.01, 0.0),           # April: no day with volume
]


def test_hand_computed_month_in_stated_units():
    # Amihud (2002): ILLIQ = mean over the month's days with volume of |r_t| / DV_t
    # (from memory). By hand: (1.0e-8 + 2.0e-8 + 0) / 3 = 1.0e-8 per currency unit,
    # x 10^6 = 0.01: a 1% price move per million currency units traded.
    out = amihud_illiquidity(_daily(HAND)).collect().sort("security")
    march = out.row(0, named=True)
    assert march["amihud"] == pytest.approx(0.01, rel=1e-12)
    assert march["n_obs"] == 3 and march["reason"] is None
    april = out.row(1, named=True)
    assert april["amihud"] is None and april["n_obs"] == 0 and april["reason"] == "zero_volume"
    # the scale is a plain factor: per currency unit with scale 1
    raw = amihud_illiquidity(_daily(HAND), scale=1.0).collect().sort("security")
    assert raw["amihud"][0] == pytest.approx(1.0e-8, rel=1e-12)


def test_registry_entry_gives_the_same_value_and_applies_its_day_minimum():
    # the measures stage's entry: same value with the minimum lowered to 3 days;
    # at its default of 15 days the 3 usable days give a reason, not a number
    out = compute_monthly(_daily(HAND), {"amihud": {"min_days": 3}}).sort("security")
    assert out.filter(pl.col("security") == "sim-ABC")["amihud"][0] == pytest.approx(0.01, rel=1e-12)
    default = compute_monthly(_daily(HAND), {"amihud": {}}).sort("security").row(0, named=True)
    assert default["amihud"] is None and default["amihud_reason"] == "too_few_days (3 < 15)"


def test_recovers_a_known_price_impact():
    # Known truth: when every day's absolute return is lambda x dollar volume (a
    # linear price-impact model, the reading Amihud 2002 gives ILLIQ; from memory),
    # ILLIQ x 10^-6 is lambda exactly, whatever the volumes and the signs.
    rng = np.random.default_rng(12)
    lam = 3.0e-9
    volume = rng.lognormal(14, 1, 21)
    sign = rng.choice([-1.0, 1.0], 21)
    days = [MARCH + dt.timedelta(days=i) for i in range(21)]
    rows = [("sim-LAM", d, s * lam * v, v) for d, s, v in zip(days, sign, volume)]
    out = amihud_illiquidity(_daily(rows)).collect()
    assert out["amihud"][0] * 1e-6 == pytest.approx(lam, rel=1e-12)
    assert out["n_obs"][0] == 21
