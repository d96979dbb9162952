"""Steps 2 and 3 of the study: security-months drawn from the calibrated pool and simulated under the Roll (1984) model."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import polars as pl

from liqpanel.bars import daily_bars
from liqpanel.core.contracts import DAILY, require_columns
from liqpanel.core.errors import ConfigError
from liqpanel.simulate import SECURITY_PREFIX, simulate_security_months
from liqpanel.study.defaults import KEY, PRICE_STEP, SIMULATION_PRICE, SIMULATION_START, WARM_UP_MONTH, WINDOW_MONTH


def draw_conditions(pool: pl.DataFrame, draws: int, seed: int) -> pl.DataFrame:
    """``draws`` security-months resampled with replacement from the calibrated ``pool``.

    Keeps the joint distribution of the pool's columns; ``draw`` numbers the
    draws from 0, ``security`` becomes the draw's own identifier (sim-D000001,
    ...) and ``origin_security``, ``origin_month`` say where it came from.
    Needs ``spread``, ``daily_vol``, ``trades_per_day``, ``n_days``.
    """
    require_columns(pool, ["spread", "daily_vol", "trades_per_day", "n_days"], table="study conditions")
    if pool.height == 0:
        raise ConfigError("the study has no security-month to draw from: every one was dropped in calibration "
                          "(see the calibration audit; lower study.min_days?)")
    if draws < 1:
        raise ConfigError(f"study.draws = {draws}: expected a positive number of draws")
    order = [c for c in KEY if c in pool.columns]
    pool = pool.sort(order) if order else pool
    index = np.random.default_rng(np.random.SeedSequence([seed, 0])).integers(0, pool.height, draws)
    drawn = pool[index]
    if "security" in drawn.columns:
        drawn = drawn.rename({"security": "origin_security"})
    if "month" in drawn.columns:
        drawn = drawn.rename({"month": "origin_month"})
    width = max(6, len(str(draws)))
    return drawn.with_columns(
        pl.Series("draw", np.arange(draws, dtype=np.int64)),
        pl.format(SECURITY_PREFIX + "D{}", pl.int_range(1, draws + 1).cast(pl.String).str.zfill(width)).alias("security"),
    )


@dataclass(frozen=True)
class Market:
    """What the simulation needs of the market profile: time zone, one session, tick."""

    timezone: str = "America/New_York"
    session: tuple[str, str] = ("09:10", "15:40")
    tick: float | None = None
    overnight_share: float = 0.0

    @classmethod
    def from_profile(cls, profile: dict[str, Any], overnight_share: float = 0.0) -> "Market":
        """From a market profile: its time zone, its first open to its last close, its tick size.

        A midday break is not simulated (convention of this project): the
        session runs from the first open to the last close. With tick
        regimes the simulator takes the latest (``markets.latest_tick``).
        """
        from liqpanel.markets import latest_tick

        sessions = profile["sessions"]
        tick = latest_tick(profile)
        return cls(
            timezone=profile["timezone"],
            session=(str(sessions[0][0]), str(sessions[-1][1])),
            tick=float(tick) if tick else None,
            overnight_share=float(overnight_share),
        )


def simulate_draws(conditions: pl.DataFrame, market: Market, seed: int) -> tuple[pl.DataFrame, pl.DataFrame]:
    """Simulate every drawn security-month; return its daily table and its truth.

    Each row of ``conditions`` (from ``draw_conditions``) is one security of
    ``simulate_security_months`` with half-spread ``spread / 2``, daily
    volatility ``daily_vol`` and ``trades_per_day``, traded for one warm-up
    business day and then its window of ``n_days`` days (all draws share one
    calendar; a draw's rows after its window are dropped). With a tick the
    relative tick depends on the price, so the draws are simulated in groups
    of similar ``price`` (within a factor ``PRICE_STEP``, each group at its
    median price); without a tick at a single price.

    The daily table follows the daily contract. Every draw's window carries
    the month ``WINDOW_MONTH`` (the window is the month) and its warm-up day
    ``WARM_UP_MONTH``, as the previous month's last day sits in the previous
    month partition of the workflow; estimates are read for the window. The
    truth, over the window, has ``security``,
    ``true_spread`` (mean ln(ask/bid) over the window's trades, 2c when there
    is no tick or no trade), ``true_vol`` (daily), ``true_vol_session``
    (sqrt(1 - overnight share) x daily), ``true_trades_per_day``,
    ``true_no_trade_share`` (realised) and ``days_traded``.
    """
    if conditions.height == 0:
        raise ConfigError("the study has no draws to simulate")
    length = int(conditions.get_column("n_days").max()) + 1
    if market.tick is not None and "price" in conditions.columns:
        price = conditions.get_column("price").fill_null(SIMULATION_PRICE).to_numpy()
        step = np.floor(np.log(np.maximum(price, 1e-12)) / np.log(PRICE_STEP))
        groups = np.unique(step, return_inverse=True)[1].astype(np.int64)
    else:
        price = np.full(conditions.height, SIMULATION_PRICE)
        groups = np.zeros(conditions.height, dtype=np.int64)
    spread = conditions.get_column("spread").to_numpy()
    vol = conditions.get_column("daily_vol").to_numpy()
    lam = conditions.get_column("trades_per_day").to_numpy()
    ids = conditions.get_column("security").to_numpy()
    seeds = np.random.SeedSequence([seed, 1]).spawn(int(groups.max()) + 1)
    trades, quotes = [], []
    for g in np.unique(groups):  # one simulation per price group (one group without a tick)
        members = np.flatnonzero(groups == g)
        sim = simulate_security_months(
            spread[members] / 2.0, vol[members], lam[members], n_days=length,
            seed=int(seeds[g].generate_state(1)[0]), tick=market.tick, tz=market.timezone, session=market.session,
            start=SIMULATION_START, price=float(np.median(price[members])), overnight_share=market.overnight_share,
        )
        rename = pl.DataFrame({"_sim": sim.securities.get_column("security"), "_draw": ids[members]})
        for table, out in ((sim.trades, trades), (sim.quotes, quotes)):
            out.append(table.join(rename, left_on="security", right_on="_sim", how="left")
                       .drop("security").rename({"_draw": "security"}))
    calendar = _calendar(length)
    window = conditions.select("security", "n_days")
    daily = (
        daily_bars(pl.concat(trades).lazy(), timezone=market.timezone)
        .join(calendar.lazy(), on="date", how="left")
        .join(window.lazy(), on="security", how="left")
        .filter(pl.col("_day") <= pl.col("n_days"))
        .with_columns(pl.when(pl.col("_day") == 0).then(pl.lit(WARM_UP_MONTH)).otherwise(pl.lit(WINDOW_MONTH)).alias("month"))
        .select(*DAILY)
        .sort("security", "date")
        .collect(engine="in-memory")
    )
    truth = _truth(conditions, daily, pl.concat(quotes), calendar, market)
    return daily, truth


def _calendar(length: int) -> pl.DataFrame:
    first = np.datetime64(SIMULATION_START, "M").astype("datetime64[D]")
    days = np.busday_offset(first, np.arange(length), roll="forward")
    return pl.DataFrame({"date": days, "_day": np.arange(length, dtype=np.int64)}).with_columns(pl.col("date").cast(pl.Date))


def _truth(conditions: pl.DataFrame, daily: pl.DataFrame, quotes: pl.DataFrame, calendar: pl.DataFrame,
           market: Market) -> pl.DataFrame:
    traded = daily.filter(pl.col("month") == WINDOW_MONTH).group_by("security").agg(
        pl.len().cast(pl.Int64).alias("days_traded"))
    truth = (
        conditions.select(
            "security", "draw", "n_days",
            (pl.col("spread") / 2.0).alias("_half"),
            pl.col("daily_vol").alias("true_vol"),
            (pl.col("daily_vol") * math.sqrt(1.0 - market.overnight_share)).alias("true_vol_session"),
            pl.col("trades_per_day").alias("true_trades_per_day"),
        )
        .join(traded, on="security", how="left")
        .with_columns(pl.col("days_traded").fill_null(0))
    )
    if market.tick is None:
        spread = pl.col("_half") * 2.0
    else:
        in_window = (
            quotes.lazy()
            .with_columns(pl.col("ts").dt.convert_time_zone(market.timezone).dt.date().alias("date"))
            .join(calendar.lazy(), on="date", how="left")
            .join(truth.lazy().select("security", "n_days"), on="security", how="left")
            .filter((pl.col("_day") >= 1) & (pl.col("_day") <= pl.col("n_days")))
            .group_by("security")
            .agg((pl.col("ask") / pl.col("bid")).log().mean().alias("_quoted"))
            .collect(engine="in-memory")
        )
        truth = truth.join(in_window, on="security", how="left")
        spread = pl.coalesce(pl.col("_quoted"), pl.col("_half") * 2.0)
    return truth.select(
        "security", "draw", "n_days",
        spread.alias("true_spread"),
        "true_vol", "true_vol_session", "true_trades_per_day",
        (1.0 - pl.col("days_traded") / pl.col("n_days")).alias("true_no_trade_share"),
        "days_traded",
    ).sort("security")
