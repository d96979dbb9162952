"""The simulator's second invented market: its own clock, closed days, tick grid and currency.

Checked against the market profile it trades on (``gullwing``: Asia/Singapore,
09:20-12:05 and 13:35-16:10, invented holidays, tick 0.05, currency ZZG),
read through ``liqpanel.markets`` (the cleaning stage's own session rules),
and against the Roll (1984) model's identities through the project's bars and
estimators. Each check names its source beside it.
"""

from __future__ import annotations

import hashlib
from datetime import date, timedelta

import numpy as np
import polars as pl
import pytest

from liqpanel.bars import add_returns, intraday_bars
from liqpanel.cli import main
from liqpanel.config import load_market
from liqpanel.core.errors import ConfigError
from liqpanel.markets import local_clock, session_index
from liqpanel.measures import compute_monthly
from liqpanel.simulate import daily_example, market_factor_returns, simulate_market, write_market

GULLWING = load_market("gullwing")
TICK = GULLWING["tick_size"]
SMALL = dict(n_securities=4, n_months=24, seed=11, bad_row_share=0.01,
             liquidity_shock_sd=0.25, liquidity_beta_mean=0.1, liquidity_beta_sd=0.3)


@pytest.fixture(scope="module")
def two() -> object:
    """Four securities of the first market and eight of the second over the demo's 24 months."""
    return simulate_market(**SMALL, second_securities=8)


@pytest.fixture(scope="module")
def one() -> object:
    """The same spec with one market."""
    return simulate_market(**SMALL)


def of_market(frame: pl.DataFrame, market, code: str) -> pl.DataFrame:
    ids = market.securities.filter(pl.col("market") == code)["security"].implode()
    return frame.filter(pl.col("security").is_in(ids))


def with_local(frame: pl.DataFrame) -> pl.DataFrame:
    day, clock = local_clock(pl.col("ts"), GULLWING)
    return frame.with_columns(day.alias("day"), clock.alias("clock"))


def on_grid(values: pl.Series, tick: float) -> np.ndarray:
    x = values.to_numpy() / tick
    return np.abs(x - np.round(x)) < 1e-6


# --------------------------------------------------------------------------
# the default stays one market, byte for byte


def test_default_output_is_unchanged():
    # Reproducibility (common practice): the CSV text of every table of this
    # small market, hashed before the second market existed (computed from the
    # parent commit of the change that added it); the second market's option
    # is off by default and must not move a single draw.
    market = simulate_market(n_securities=6, n_months=3, seed=7, bad_row_share=0.01, liquidity_shock_sd=0.25,
                             liquidity_beta_mean=0.1, liquidity_beta_sd=0.3)
    tables = {**market.tables(), "factors": market_factor_returns(market), "daily_example": daily_example(market)}
    digest = hashlib.sha256()
    for name in sorted(tables):
        digest.update(name.encode())
        digest.update(tables[name].write_csv().encode())
    assert digest.hexdigest() == "3f854937ef5157f25965407619dce7e221923e9f6f2120ea2af9d420b309b87a"
    assert "market" not in market.securities.columns and market.fx is None


def test_first_market_is_the_one_market_draw_for_draw(two, one):
    # the second market draws from streams of its own (liqpanel.simulate docstring)
    assert set(two.securities["market"]) == {"HBR", "GUL"}
    assert two.securities.filter(market="HBR").drop("market").equals(one.securities)
    for name in ("trades", "quotes", "characteristics", "returns", "truth"):
        assert of_market(getattr(two, name), two, "HBR").equals(getattr(one, name)), name


def test_tables_cover_both_markets_sorted_with_distinct_names(two):
    assert two.securities.height == 12 and two.securities["security"].is_unique().all()
    assert two.securities["firm_name"].is_unique().all()
    assert two.securities.filter(market="GUL").height == 8
    # the truth covers every security-month of both markets
    assert two.truth.height == 12 * 24 and set(two.truth["security"]) == set(two.securities["security"])
    assert two.truth.select(pl.col("spread").is_finite().all()).item()
    for name, key in (("trades", ["security", "ts"]), ("quotes", ["security", "ts"]),
                      ("characteristics", ["security", "date"]), ("truth", ["security", "month"])):
        frame = getattr(two, name)
        assert frame.equals(frame.sort(key, maintain_order=True)), name
    # characteristics of the second market: its own month ends (its last open day, in its currency)
    gul = of_market(two.characteristics, two, "GUL")
    assert set(gul["date"]).isdisjoint(GULLWING["_holidays"])


# --------------------------------------------------------------------------
# calendar, clock and tick of the second market


def test_no_trade_or_quote_on_a_closed_day(two):
    # closed days of the profile: weekends and its holidays (common practice: no trading when closed)
    holidays = set(GULLWING["_holidays"])
    for name in ("trades", "quotes"):
        local = with_local(of_market(getattr(two, name), two, "GUL"))
        assert local.height > 1000
        days = set(local["day"])
        assert days.isdisjoint(holidays), name
        assert all(d.weekday() < 5 for d in days), name
    # the first market keeps trading on the second's holidays (calendars differ)
    hbr_days = set(of_market(two.trades, two, "HBR")["ts"].dt.convert_time_zone("America/New_York").dt.date())
    assert len(holidays & hbr_days) >= 10
    # every other weekday of the sample is open in the second market, and its
    # truth counts exactly the open days with a trade
    first, last = date(2021, 1, 1), date(2022, 12, 31)
    weekdays = {first + timedelta(k) for k in range((last - first).days + 1)} - holidays
    weekdays = {d for d in weekdays if d.weekday() < 5}
    assert set(with_local(of_market(two.quotes, two, "GUL"))["day"]) == weekdays


def test_trades_fall_inside_the_sessions_in_the_market_time_zone(two):
    # the profile's sessions read by liqpanel.markets (the cleaning rule outside_session)
    trades = with_local(of_market(two.trades, two, "GUL")).with_columns(
        session_index(GULLWING, pl.col("clock"), pl.col("day")).alias("session")
    )
    good = trades.filter(pl.col("true_sign") != 0)
    assert good["session"].null_count() == 0
    counts = good["session"].value_counts().sort("session")
    # both sessions trade, in proportion to their length (165 and 155 minutes; binomial, 5 standard errors)
    share = counts["count"][0] / good.height
    assert share == pytest.approx(165 / 320, abs=5 * np.sqrt(0.25 / good.height))
    # nothing in the midday break 12:05-13:35
    clock = good["clock"]
    assert not clock.is_between(pl.lit("12:05:00.000001").str.to_time("%H:%M:%S%.f"),
                                pl.lit("13:34:59.999999").str.to_time("%H:%M:%S%.f")).any()
    # the planted rows outside the session (30-120 minutes beyond it) are outside every session
    quoted = set(zip(two.quotes["security"], two.quotes["ts"]))
    outside = trades.filter((pl.col("true_sign") == 0) & pl.col("session").is_null())
    assert outside.height > 0
    assert not any((s, t) in quoted for s, t in zip(outside["security"], outside["ts"]))


def test_every_price_of_the_second_market_is_on_its_tick_grid(two):
    # quotes rounded outwards to the tick and trades at a quote (liqpanel.simulate docstring)
    trades = of_market(two.trades, two, "GUL").filter(pl.col("price") > 0)
    quotes = of_market(two.quotes, two, "GUL")
    assert on_grid(trades["price"], TICK).all()
    assert on_grid(quotes["bid"], TICK).all() and on_grid(quotes["ask"], TICK).all()
    assert (quotes["ask"] - quotes["bid"] >= TICK - 1e-9).all()
    # the first market has no tick: its prices are almost never on that grid
    assert on_grid(of_market(two.trades, two, "HBR").filter(pl.col("price") > 0)["price"], TICK).mean() < 0.01


def test_exchange_rates_cover_every_open_day_and_are_positive(two):
    fx = two.fx
    assert fx.columns == ["date", "currency", "rate"] and set(fx["currency"]) == {"ZZG"}
    assert fx["date"].is_unique().all() and fx["date"].is_sorted()
    # every open day of either market: the union of the days each market trades or quotes on
    hbr = set(of_market(two.quotes, two, "HBR")["ts"].dt.convert_time_zone("America/New_York").dt.date())
    gul = set(with_local(of_market(two.quotes, two, "GUL"))["day"])
    assert set(fx["date"]) == hbr | gul
    rate = fx["rate"].to_numpy()
    assert np.all(np.isfinite(rate)) and np.all(rate > 0) and rate[0] == 0.42
    # a random walk in logs with daily sd fx_vol = 0.003: the sample sd of the
    # log changes has standard error sd / sqrt(2n) (normal theory), here about 3%
    steps = np.diff(np.log(rate))
    assert np.std(steps, ddof=1) == pytest.approx(0.003, rel=5 / np.sqrt(2 * len(steps)) + 0.01)


def test_market_factor_converts_the_second_market_into_the_first_currency(two):
    # (1 + r) x rate_t / rate_t-1 - 1 in the first market's currency, weights cap x rate (liqpanel.simulate)
    factor = market_factor_returns(two).to_pandas().set_index("month")["mkt"]
    chars = two.characteristics.join(two.securities.select("security", "market"), on="security")
    rates = chars.join(two.fx, on="date", how="left").with_columns(
        pl.when(pl.col("market") == "HBR").then(1.0).otherwise(pl.col("rate")).alias("x"),
        pl.col("date").dt.truncate("1mo").alias("month"),
    ).sort("security", "month").to_pandas()
    rates["value"] = rates["market_cap"] * rates["x"]
    # with constant shares, value_t / value_t-1 = (1 + r) x rate_t / rate_t-1 (characteristics: cap = close x shares)
    rates["weight"] = rates.groupby("security")["value"].shift(1)
    rates["growth"] = rates["value"] / rates["weight"]
    month = rates["month"].sort_values().unique()[5]
    rows = rates[rates["month"] == month].dropna(subset=["growth", "weight"])
    expected = ((rows["growth"] - 1) * rows["weight"]).sum() / rows["weight"].sum()
    assert factor.loc[month] == pytest.approx(expected, rel=1e-9)


# --------------------------------------------------------------------------
# recovery of the truth on the second market


def test_spread_estimators_recover_the_truth_on_the_tick_grid():
    # Roll (1984) model with pinned c = 0.5%, daily sigma 0.5%, 40 trades a day,
    # prices 40-60 ZZG on the 0.05 grid, 8 securities x 6 months of the second market.
    c = 0.005
    market = simulate_market(n_securities=2, second_securities=8, n_months=6, seed=1, half_spread=c,
                             daily_vol=0.005, trades_per_day=40.0, price_range=(40.0, 60.0))
    trades, quotes = of_market(market.trades, market, "GUL"), of_market(market.quotes, market, "GUL")
    daily = add_returns(intraday_bars(trades.lazy(), quotes.lazy(), GULLWING)).collect()
    monthly = compute_monthly(daily.lazy(), {
        "effective_spread": {"min_days": 15},
        "roll_spread": {"series": "log_price", "convention": "signed", "min_days": 15},
    }).join(daily.group_by("security", "month").agg(pl.col("close").mean().alias("price")), on=["security", "month"])
    assert monthly.height == 48 and monthly["effective_spread"].null_count() == 0
    # Effective spread: bid and ask rounded outwards each move by a uniform
    # share of a tick, so ask - bid gains one tick on average and the
    # effective spread is 2 tanh(c) + tick / price (derived from the
    # simulator's rounding; 2 tanh(c) from the Roll model with quotes e^(m +- c)).
    # Measured over seeds 1-8: every month's excess within 0.956-1.052 ticks.
    excess = (monthly["effective_spread"] - 2 * np.tanh(c)) * monthly["price"] / TICK
    assert excess.mean() == pytest.approx(1.0, abs=0.02)
    assert excess.min() > 0.9 and excess.max() < 1.1
    # Roll (1984): cov(dp_t, dp_t-1) = -c_eff^2 per month; pooled over the 48
    # months, 2 sqrt(-mean cov) estimates the effective spread above. The
    # autocovariance's standard error over 48 months of 21 days is about 10%
    # of c^2, so 5% of the spread; 20% is four standard errors (measured over
    # seeds 1-8: ratios 0.885-1.034).
    signed = monthly["roll_spread"].to_numpy()
    gamma1 = -np.sign(signed) * (signed / 2) ** 2
    pooled = 2 * np.sqrt(-gamma1.mean())
    target = 2 * c + (TICK / monthly["price"]).mean()
    assert pooled == pytest.approx(target, rel=0.20)


# --------------------------------------------------------------------------
# files, command line, errors


def test_write_market_and_command_line_add_the_fx_file(tmp_path, two):
    paths = write_market(two, tmp_path / "api")
    assert "fx" in paths and pl.read_parquet(paths["fx"]).equals(two.fx)
    assert pl.read_parquet(paths["securities"])["market"].to_list() == two.securities["market"].to_list()
    example = pl.read_csv(paths["daily_example"], try_parse_dates=True)
    assert set(example["listing"]) == {"HBR", "GUL"}
    # the daily file's second-market days are its own local days
    gul_days = set(example.filter(listing="GUL")["trade_day"])
    assert gul_days.isdisjoint(GULLWING["_holidays"])
    assert main(["simulate", "--securities", "3", "--months", "2", "--second-market-securities", "2",
                 "--out", str(tmp_path / "cli")]) == 0
    assert (tmp_path / "cli" / "fx.parquet").exists()
    assert pl.read_parquet(tmp_path / "cli" / "securities.parquet")["market"].value_counts().height == 2
    assert main(["simulate", "--securities", "3", "--months", "2", "--out", str(tmp_path / "off")]) == 0
    assert not (tmp_path / "off" / "fx.parquet").exists()


def test_bad_second_market_parameters_raise_clear_errors(tmp_path):
    with pytest.raises(ConfigError, match="'second_securities' = -1"):
        simulate_market(n_securities=2, second_securities=-1)
    with pytest.raises(ConfigError, match="'market_codes'"):
        simulate_market(n_securities=2, second_securities=2, market_codes=("HBR", "HBR"))
    with pytest.raises(ConfigError, match="not found"):
        simulate_market(n_securities=2, n_months=1, second_securities=2, second_profile="no-such-market")
    with pytest.raises(ConfigError, match="does not model half days"):
        simulate_market(n_securities=2, n_months=1, second_securities=2, second_profile="kestrel")
    profile = tmp_path / "no_currency.yaml"
    profile.write_text("timezone: Asia/Singapore\nsessions:\n  - ['09:20', '16:10']\n")
    with pytest.raises(ConfigError, match="names no currency"):
        simulate_market(n_securities=2, n_months=1, second_securities=2, second_profile=str(profile))
