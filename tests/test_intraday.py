"""High-frequency benchmarks: recovery of the simulator's spread, the
effective = realized + price impact identity, the horizon near the close,
realized variance against pandas and against the simulator's volatility,
and the monthly measures with their minimum-days rule."""

from datetime import date, datetime, timedelta, timezone
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
import polars as pl
import pytest

from polars.testing import assert_frame_equal

from liqpanel.bars import add_returns, intraday_bars, needed_columns
from liqpanel.config import load_market
from liqpanel.bars.intraday import SPREAD_MEASURES, daily_benchmarks, realized_variance, trade_benchmarks
from liqpanel.measures import compute_monthly
from liqpanel.simulate import simulate_security_months

DEMO = load_market("demo")
KESTREL = load_market("kestrel")  # sessions 08:40-11:25 and 12:55-15:10, Asia/Kolkata
HALF = np.array([0.001, 0.004, 0.015])


@pytest.fixture(scope="module")
def roll_market():
    # known half-spreads c; quotes bid = e^(m - c), ask = e^(m + c) at every trade (liqpanel.simulate)
    return simulate_security_months(HALF, 0.02, 40.0, n_days=21, seed=7)


@pytest.fixture(scope="module")
def per_trade(roll_market):
    return trade_benchmarks(roll_market.trades.lazy(), roll_market.quotes.lazy(), DEMO).collect()


def _monthly(market, selection):
    daily = add_returns(intraday_bars(market.trades.lazy(), market.quotes.lazy(), DEMO)).collect()
    return compute_monthly(daily.lazy(), selection).sort("security")


def test_effective_spread_recovers_the_true_spread(roll_market):
    # with quotes e^(m +- c) and trades at them, 2 q (p - mid)/mid = 2 tanh(c) per
    # trade (liqpanel.simulate docstring), within (2/3) c^3 of the true 2c; so the
    # monthly means equal 2 tanh(c) up to floating-point rounding
    monthly = _monthly(roll_market, {"effective_spread": None, "quoted_spread": None})
    truth = 2 * np.tanh(HALF)
    assert monthly["effective_spread"].to_numpy() == pytest.approx(truth, rel=1e-9)
    assert monthly["effective_spread_size_weighted"].to_numpy() == pytest.approx(truth, rel=1e-9)
    assert np.abs(truth - 2 * HALF).max() <= (2 / 3) * np.max(HALF) ** 3
    assert monthly["quoted_spread"].to_numpy() == pytest.approx(2 * np.tanh(HALF), rel=1e-9)
    assert monthly["effective_spread_n"].to_list() == [21, 21, 21]


def test_effective_spread_on_a_tick_grid_stays_within_the_rounding_band():
    # quotes rounded outwards to the tick (bid down, ask up): the effective spread
    # lies between the true spread and the true spread + 2 ticks / price
    tick, price = 0.01, 50.0
    market = simulate_security_months(HALF, 0.01, 40.0, n_days=21, seed=8, tick=tick, price=price)
    monthly = _monthly(market, {"effective_spread": None})
    estimate = monthly["effective_spread"].to_numpy()
    assert np.all(estimate >= 2 * HALF * (1 - 1e-3))
    assert np.all(estimate <= 2 * HALF + 2.5 * tick / price)


def test_realized_spread_plus_price_impact_is_the_effective_spread(per_trade):
    # identity of the definitions: 2q(p - m)/m = 2q(p - m_h)/m + 2q(m_h - m)/m
    both = per_trade.drop_nulls(["effective_spread", "realized_spread", "price_impact"])
    assert both.height > 0.99 * per_trade.height
    gap = (both["realized_spread"] + both["price_impact"] - both["effective_spread"]).abs().max()
    assert gap < 1e-12
    daily = daily_benchmarks(per_trade.lazy()).collect()
    for suffix in ("", "_size_weighted"):
        total = daily[f"realized_spread{suffix}"] + daily[f"price_impact{suffix}"]
        assert (total - daily[f"effective_spread{suffix}"]).abs().max() < 1e-12


def test_price_impact_is_zero_on_average_when_trades_carry_no_information(per_trade):
    # in the Roll (1984) model the efficient price is a martingale independent of
    # the signs, so E[q (m_h - m)] = 0; band: 4 standard errors
    impact = per_trade["price_impact"].drop_nulls()
    assert abs(impact.mean()) < 4 * impact.std() / np.sqrt(impact.len())


def _near_close(market, quote_minutes, trade_minute, horizon, past_close, price=10.2):
    tz = ZoneInfo(market["timezone"])
    day = datetime(2021, 3, 1, tzinfo=tz)

    def at(minutes):
        return (day + timedelta(minutes=minutes)).astimezone(timezone.utc)

    quotes = pl.DataFrame(
        {
            "security": ["X"] * len(quote_minutes),
            "ts": [at(m) for m in quote_minutes],
            "bid": [10.0 + 0.1 * k for k in range(len(quote_minutes))],
            "ask": [10.2 + 0.1 * k for k in range(len(quote_minutes))],
        }
    )
    trades = pl.DataFrame({"security": ["X"], "ts": [at(trade_minute)], "price": [price], "size": [1.0]})
    return trade_benchmarks(
        trades.lazy(), quotes.lazy(), market, horizon_minutes=horizon, past_close=past_close
    ).collect().row(0, named=True)


def test_horizon_past_the_close_uses_the_sessions_last_midpoint_or_is_excluded():
    # the demo market's close 15:40 = minute 940; trade at 15:38, quotes at 15:37 and 15:39:30
    quotes = [937, 939.5]
    kept = _near_close(DEMO, quotes, 938, 5, "session_close")
    assert kept["mid_later"] == pytest.approx(10.2)  # the 15:39:30 quote, bid 10.1 ask 10.3
    assert kept["realized_spread"] + kept["price_impact"] == pytest.approx(kept["effective_spread"])
    dropped = _near_close(DEMO, quotes, 938, 5, "exclude")
    assert dropped["realized_spread"] is None and dropped["effective_spread"] is not None


def test_horizon_never_reaches_across_a_midday_break():
    # Kestrel's morning session closes 11:25 (minute 685), the afternoon opens 12:55 (775);
    # a trade at 11:20 with a two-hour horizon takes the last morning midpoint
    row = _near_close(KESTREL, [670, 680, 780], 680, 120, "session_close", price=10.3)
    assert row["mid"] == pytest.approx(10.2) and row["mid_later"] == pytest.approx(10.2)
    assert row["price_impact"] == pytest.approx(0.0)


def _pandas_realized_variance(ts_local, prices, open_, close, minutes):
    # reference: pandas previous-tick sampling on a right-closed grid
    series = pd.Series(prices, index=pd.DatetimeIndex(ts_local))
    grid = pd.date_range(open_, close, freq=f"{minutes}min")
    sampled = series.reindex(series.index.union(grid)).sort_index().ffill().loc[grid].dropna()
    returns = np.diff(np.log(sampled.to_numpy()))
    return float(np.sum(returns**2)), len(returns)


def test_realized_variance_matches_pandas_previous_tick_sampling():
    rng = np.random.default_rng(3)
    tz = ZoneInfo("America/New_York")
    open_, close = datetime(2021, 3, 2, 9, 10, tzinfo=tz), datetime(2021, 3, 2, 15, 40, tzinfo=tz)
    seconds = np.sort(rng.choice(np.arange(60, 6 * 3600), size=300, replace=False))  # none at the open
    local = [open_ + timedelta(seconds=int(s)) for s in seconds]
    prices = 20 * np.exp(np.cumsum(rng.normal(0, 0.001, size=300)))
    frame = pl.DataFrame({"security": ["X"] * 300, "ts": [t.astimezone(timezone.utc) for t in local], "price": prices})
    ours = realized_variance(frame.lazy(), DEMO, interval_minutes=5).collect().row(0, named=True)
    expected, n = _pandas_realized_variance([t.replace(tzinfo=None) for t in local], prices,
                                            open_.replace(tzinfo=None), close.replace(tzinfo=None), 5)
    assert ours["realized_variance"] == pytest.approx(expected, rel=1e-12)
    assert ours["realized_variance_returns"] == n


def test_realized_variance_of_ordered_and_shuffled_prices_matches_pandas_per_security():
    # Three securities over two days; the in-order path (a clean partition,
    # no sort) and the sorting path (rows shuffled) against the pandas
    # previous-tick reference above, security by security and day by day.
    rng = np.random.default_rng(11)
    tz = ZoneInfo("America/New_York")
    rows, expected = [], {}
    for security in ("X", "Y", "Z"):
        for day in (2, 3):
            open_, close = datetime(2021, 3, day, 9, 10, tzinfo=tz), datetime(2021, 3, day, 15, 40, tzinfo=tz)
            seconds = np.sort(rng.choice(np.arange(60, 6 * 3600), size=120, replace=False))
            local = [open_ + timedelta(seconds=int(s)) for s in seconds]
            prices = 20 * np.exp(np.cumsum(rng.normal(0, 0.001, size=120)))
            rows += [(security, t.astimezone(timezone.utc), p) for t, p in zip(local, prices)]
            expected[(security, day)] = _pandas_realized_variance(
                [t.replace(tzinfo=None) for t in local], prices, open_.replace(tzinfo=None), close.replace(tzinfo=None), 5)
    frame = pl.DataFrame(rows, schema=["security", "ts", "price"], orient="row")
    shuffled = frame.sample(fraction=1.0, shuffle=True, seed=4)
    for got in (realized_variance(frame.lazy(), DEMO, interval_minutes=5, in_order=True),
                realized_variance(shuffled.lazy(), DEMO, interval_minutes=5)):
        got = got.collect().sort("security", "date")
        assert got.height == 6
        for row in got.iter_rows(named=True):
            variance, n = expected[(row["security"], row["date"].day)]
            assert row["realized_variance"] == pytest.approx(variance, rel=1e-12)
            assert row["realized_variance_returns"] == n


def test_realized_variance_sums_sessions_without_the_midday_break():
    # one price per session edge: a jump across the break must not count
    tz = ZoneInfo("Asia/Kolkata")
    times = [datetime(2021, 3, 2, 8, 40, tzinfo=tz), datetime(2021, 3, 2, 11, 25, tzinfo=tz),
             datetime(2021, 3, 2, 12, 55, tzinfo=tz), datetime(2021, 3, 2, 15, 10, tzinfo=tz)]
    prices = [10.0, 11.0, 20.0, 22.0]
    frame = pl.DataFrame({"security": ["X"] * 4, "ts": [t.astimezone(timezone.utc) for t in times], "price": prices})
    row = realized_variance(frame.lazy(), KESTREL, interval_minutes=15).collect().row(0, named=True)
    assert row["realized_variance"] == pytest.approx(np.log(1.1) ** 2 + np.log(1.1) ** 2)
    assert row["realized_variance_returns"] == 11 + 9  # 165 and 135 minutes in 15-minute steps


def test_realized_variance_recovers_the_efficient_variance():
    # midquote = efficient price (no tick); with 1,500 quotes a day the 5-minute
    # realized variance is unbiased for the daily variance sigma^2 (Andersen &
    # Bollerslev 1998, from memory); band 10% over 4 x 21 security-days
    vol = 0.02
    market = simulate_security_months(np.full(4, 0.002), vol, 1500.0, n_days=21, seed=5)
    monthly = _monthly(market, {"realized_variance": None})
    assert monthly["realized_variance"].mean() == pytest.approx(vol**2, rel=0.10)
    # 78 grid returns a day, less the first (no trade exactly at the open)
    assert monthly["realized_variance_returns"].to_list() == [21 * 77] * 4


def test_monthly_benchmarks_follow_the_minimum_days_rule():
    market = simulate_security_months(np.array([0.002]), 0.02, 20.0, n_days=10, seed=9)
    monthly = _monthly(market, {m: None for m in SPREAD_MEASURES})
    row = monthly.row(0, named=True)
    assert row["effective_spread"] is None and row["effective_spread_reason"].startswith("too_few_days")
    relaxed = _monthly(market, {"effective_spread": {"min_days": 5}})
    # every trade's effective spread is exactly 2 tanh(c) (liqpanel.simulate docstring)
    assert relaxed["effective_spread"][0] == pytest.approx(2 * np.tanh(0.002), rel=1e-9)


def test_bars_without_quotes_keep_every_benchmark_column_missing(roll_market):
    bars = intraday_bars(roll_market.trades.lazy(), None, DEMO).collect()
    assert bars["effective_spread"].null_count() == bars.height
    assert bars["realized_variance"].null_count() == 0  # from trade prices
    assert bars.schema["n_quoted"] == pl.Int64 and bars["n_quoted"].sum() == 0
    assert bars["date"].min() == date(2021, 1, 1)  # the simulator's first business day


@pytest.mark.parametrize(
    ("measures", "expected"),
    [
        ({"roll_spread": None, "amihud": None}, []),
        ({"realized_variance": None}, ["realized_variance", "realized_variance_returns"]),
        ({"price_impact": None, "roll_spread": None},
         ["n_quoted", "n_signed", *SPREAD_MEASURES, *[f"{m}_size_weighted" for m in SPREAD_MEASURES],
          "close_bid", "close_ask", "kyle_lambda", "kyle_lambda_n"]),
    ],
)
def test_bars_compute_only_the_columns_the_selected_measures_read(roll_market, measures, expected):
    # the narrow bars must equal the same columns of the full bars, value for value
    full = intraday_bars(roll_market.trades.lazy(), roll_market.quotes.lazy(), DEMO).collect()
    wanted = needed_columns(measures)
    assert set(wanted) <= set(expected) and (not expected or wanted)
    narrow = intraday_bars(roll_market.trades.lazy(), roll_market.quotes.lazy(), DEMO, columns=wanted).collect()
    base = ["security", "date", "open", "high", "low", "close", "volume", "dollar_volume", "n_trades", "vwap", "month"]
    assert narrow.columns == base + expected
    assert_frame_equal(narrow, full.select(narrow.columns))
    assert full.height == 3 * 21 and full["effective_spread"].null_count() == 0  # the full bars had values to compare


def test_static_bar_columns_agree_with_the_measure_registry():
    # the table a bars job reads instead of importing the registry: for every registered measure,
    # the same columns as its registered ones that liqpanel.bars.intraday offers, in the same order
    from liqpanel.bars import BAR_COLUMNS_OF, READS_NO_BAR_COLUMN
    from liqpanel.bars.intraday import daily_columns
    from liqpanel.measures import REGISTRY

    offered = daily_columns()
    assert set(BAR_COLUMNS_OF) | READS_NO_BAR_COLUMN == set(REGISTRY)
    assert not set(BAR_COLUMNS_OF) & READS_NO_BAR_COLUMN
    for name, measure in REGISTRY.items():
        registered = [c for c in offered if c in measure.columns]
        assert list(BAR_COLUMNS_OF.get(name, ())) == registered, name
        assert needed_columns([name]) == registered, name
    everything = [c for c in offered if any(c in m.columns for m in REGISTRY.values())]
    assert needed_columns(REGISTRY) == everything
    assert "effective_spread" in everything and "realized_variance" in everything  # the table is not empty
