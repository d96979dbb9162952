"""Liu (2006) LM1 and LM12: worked values, the twelve-month aggregate, recovery on a simulated calendar."""

from datetime import date, timedelta

import numpy as np
import polars as pl
import pytest

from liqpanel.measures import compute_monthly
from liqpanel.measures.liu import liu_lm, liu_lm12


def _month(security, month, volumes, shares=1e6):
    days = [month + timedelta(days=i) for i in range(len(volumes))]
    return pl.DataFrame({"security": security, "date": days, "month": month, "volume": np.asarray(volumes, float),
                         "shares_out": shares})


def test_worked_value_of_lm1():
    # Liu (2006): LM1 = [NoZV + (1 / TO) / deflator] x 21 / NoTD (from memory). 20 days, 4 without volume,
    # turnover = 16 x 5,000 / 1e6 = 0.08: LM1 = (4 + 12.5 / 11,000) x 21 / 20.
    daily = _month("A", date(2021, 1, 1), [0] * 4 + [5000] * 16)
    out = liu_lm(daily.lazy(), calendar="security").collect()
    assert out["liu_lm1"][0] == pytest.approx((4 + (1 / 0.08) / 11_000) * 21 / 20)
    assert out["liu_zero_days"][0] == 4 and out["liu_turnover"][0] == pytest.approx(0.08)


def test_days_without_a_row_are_zero_volume_days_on_the_market_calendar():
    a = _month("A", date(2021, 1, 1), [100] * 10)
    b = _month("B", date(2021, 1, 1), [100] * 10).filter(pl.col("date") != date(2021, 1, 5))
    out = liu_lm(pl.concat([a, b]).lazy()).collect().sort("security")
    assert out["liu_zero_days"].to_list() == [0, 1]
    assert out["liu_days"].to_list() == [10, 10]


def test_lm12_sums_the_components_of_twelve_consecutive_months():
    # LM12 = [sum NoZV + (1 / sum TO) / 480,000] x 252 / sum NoTD (Liu 2006, from memory); 13 months of which
    # month k has k zero-volume days out of 20: the 12-month window ending in month 13 holds months 2..13.
    frames = []
    for k in range(1, 14):
        month = date(2020 + (k - 1) // 12, (k - 1) % 12 + 1, 1)
        frames.append(_month("A", month, [0] * k + [1000] * (20 - k)))
    daily = pl.concat(frames)
    monthly = compute_monthly(daily.lazy(), {"liu_lm": {"calendar": "security"}})
    lm12 = liu_lm12(monthly)
    assert lm12["liu_lm12"][:11].is_null().all()
    zeros = sum(range(2, 14))
    turnover = sum((20 - k) * 1000 / 1e6 for k in range(2, 14))
    assert lm12["liu_lm12"][12] == pytest.approx((zeros + (1 / turnover) / 480_000) * 252 / 240)
    # a gap in the months leaves the window incomplete
    gapped = liu_lm12(monthly.filter(pl.col("month") != date(2020, 6, 1)))
    assert gapped["liu_lm12"].is_null().all()


def test_recovers_the_zero_volume_rate_of_a_simulated_market():
    # Known truth: each day a security trades with probability p, so LM1 is about 21 (1 - p) zero-volume days
    # plus a tie-breaker below 1 / deflator x 1 / TO = 0.0012 days here; 500 months of 21 days, tolerance
    # 3 standard errors of the mean of a binomial count: 3 sqrt(21 p (1 - p) / 500) = 0.24 days.
    rng = np.random.default_rng(8)
    p = 0.7
    traded = rng.random((500, 21)) < p
    frames = pl.concat([
        _month(f"S{i:03d}", date(2021, 1, 1), np.where(traded[i], 50_000.0, 0.0)) for i in range(500)
    ])
    out = liu_lm(frames.lazy(), calendar="security").collect()
    assert out["liu_lm1"].mean() == pytest.approx(21 * (1 - p), abs=0.24)
