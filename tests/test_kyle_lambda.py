"""Kyle's lambda per day: OLS against statsmodels, recovery of a known price impact, the monthly benchmark."""

from datetime import date, datetime, timedelta, timezone

import numpy as np
import polars as pl
import pytest
import statsmodels.api as sm

from liqpanel.bars.intraday import kyle_lambda
from liqpanel.measures import compute_monthly


def _per_trade(lam: float, days: int, seed: int, noise: float = 2e-4) -> tuple[pl.DataFrame, list]:
    """Trades whose interval midpoints move by lam x S_n + noise: log m_n = log m_{n-1} + lam S_n + e_n.

    78 five-minute intervals a day, 1 to 6 trades each; every trade of interval n carries the midpoint m_n,
    so the midpoint at the interval's last trade is m_n.
    """
    rng = np.random.default_rng(seed)
    rows, flows = [], []
    for d in range(days):
        day = date(2021, 1, 4) + timedelta(days=d)
        open_ = datetime(day.year, day.month, day.day, 14, 30, tzinfo=timezone.utc)
        log_mid, day_flows = np.log(50.0), []
        for n in range(78):
            k = rng.integers(1, 7)
            sign = rng.choice([-1.0, 1.0], k)
            size = rng.integers(1, 20, k) * 100.0
            price = np.exp(log_mid) * (1 + 0.001 * sign)
            flow = float(np.sum(sign * np.sqrt(price * size)))
            log_mid += lam * flow + rng.normal(0, noise)
            day_flows.append((flow, log_mid))
            for j in range(k):
                ts = open_ + timedelta(minutes=5 * n, seconds=10 + 30 * j)
                rows.append(("A", day, ts, float(price[j]), float(size[j]), float(np.exp(log_mid)), int(sign[j])))
        flows.append(day_flows)
    frame = pl.DataFrame(rows, schema={"security": pl.String, "date": pl.Date, "ts": pl.Datetime("us", "UTC"),
                                       "price": pl.Float64, "size": pl.Float64, "mid": pl.Float64, "sign": pl.Int8},
                         orient="row")
    return frame, flows


def test_daily_slope_equals_statsmodels_ols():
    # reference library: statsmodels OLS of r_n on a constant and S_n over the day's intervals
    frame, flows = _per_trade(2e-6, 2, seed=1)
    out = kyle_lambda(frame.lazy()).collect().sort("date")
    for day, rows in enumerate(flows):
        flow, log_mid = np.array(rows).T
        fit = sm.OLS(np.diff(log_mid), sm.add_constant(flow[1:])).fit()
        assert out["kyle_lambda"][day] == pytest.approx(fit.params[1], rel=1e-9)
        assert out["kyle_lambda_n"][day] == 77


def test_recovers_a_known_price_impact():
    # Known truth lam = 2e-6 per sqrt(currency); the mean of 20 daily slopes is within 5% (measured on this
    # design: sd of one day's slope 4% of lam, so 0.9% for the mean of 20 days).
    frame, _ = _per_trade(2e-6, 20, seed=2)
    out = kyle_lambda(frame.lazy()).collect()
    assert out["kyle_lambda"].mean() == pytest.approx(2e-6, rel=0.05)


def test_monthly_benchmark_is_the_mean_of_days_and_too_few_intervals_are_missing():
    frame, _ = _per_trade(1e-6, 16, seed=3)
    daily = kyle_lambda(frame.lazy()).collect().with_columns(pl.lit(date(2021, 1, 1)).alias("month"))
    monthly = compute_monthly(daily.lazy(), {"kyle_lambda": None})
    assert monthly["kyle_lambda"][0] == pytest.approx(daily["kyle_lambda"].mean(), rel=1e-12)
    short = kyle_lambda(frame.filter(pl.col("ts").dt.hour() < 15).lazy()).collect()  # 6 intervals: 5 returns
    assert short["kyle_lambda_n"].max() == 5 and short["kyle_lambda"].null_count() == 0
    shorter = kyle_lambda(frame.filter(pl.col("ts") < pl.col("ts").min() + timedelta(minutes=15)).lazy()).collect()
    assert shorter["kyle_lambda"].null_count() == shorter.height
