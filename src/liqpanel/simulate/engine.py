"""The engine: efficient prices, trades and quotes of a population of securities over a calendar."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import polars as pl

from liqpanel.simulate.calendar import _Calendar, _MICROS_PER_MINUTE, _sessions_utc, _wall_clock
from liqpanel.simulate.spec import Market, UTC


@dataclass(frozen=True)
class _Population:
    security: np.ndarray  # str, sorted
    firm_name: np.ndarray
    shares_out: np.ndarray
    price0: np.ndarray
    beta: np.ndarray
    daily_vol: np.ndarray
    trades_per_day: np.ndarray
    half_spread: np.ndarray  # (n, months)
    expected_ret: np.ndarray  # (n, months)
    book_to_market: np.ndarray | None  # (n, months)
    liquidity_shock: np.ndarray | None = None  # (months,) planted liquidity innovation -eta_t
    liquidity_factor: np.ndarray | None = None  # (months,) F_t
    liquidity_beta: np.ndarray | None = None  # (n,) b_i


@dataclass(frozen=True)
class _Trading:
    market_vol: float
    overnight_share: float
    tick: float | None
    bad_row_share: float
    tz: str
    sessions: tuple[tuple[str, str], ...]  # local (open, close) in order; the gaps between them are breaks
    lot: float
    trade_lots: float
    quote_lots: float


def _segment_starts(counts: np.ndarray) -> np.ndarray:
    return np.cumsum(counts) - counts


def _round_out(bid: np.ndarray, ask: np.ndarray, tick: float) -> tuple[np.ndarray, np.ndarray]:
    """Bid down and ask up to the tick grid; the bid stays at least one tick."""
    decimals = max(0, int(np.ceil(-np.log10(tick))) + 2)
    bid_ticks = np.maximum(np.floor(bid / tick + 1e-9), 1.0)
    ask_ticks = np.maximum(np.ceil(ask / tick - 1e-9), bid_ticks + 1.0)
    return np.round(bid_ticks * tick, decimals), np.round(ask_ticks * tick, decimals)


def _ffill_columns(values: np.ndarray) -> np.ndarray:
    """Carry the last non-NaN value forward along axis 1."""
    valid = ~np.isnan(values)
    index = np.where(valid, np.arange(values.shape[1])[None, :], 0)
    np.maximum.accumulate(index, axis=1, out=index)
    return np.take_along_axis(values, index, axis=1)


def _run(rng: np.random.Generator, pop: _Population, cal: _Calendar, how: _Trading, spec=None) -> Market:
    """Simulate the market of ``pop`` over ``cal``: the one code path of this module."""
    n, n_days, n_months = len(pop.security), len(cal.days), len(cal.months)
    opens, lengths = _sessions_utc(cal.days, how.tz, how.sessions)
    open_us, session_us = opens[0], int(lengths.sum())
    close_us = opens[-1] + lengths[-1]
    days_in_month = np.bincount(cal.month_of_day, minlength=n_months)

    # daily efficient log returns: overnight jump and session part, factor + idiosyncratic
    variance = pop.daily_vol**2
    idio_sd = np.sqrt(np.maximum(variance - (pop.beta * how.market_vol) ** 2, 0.0))
    factor = rng.standard_normal((2, n_days)) * how.market_vol
    idio = rng.standard_normal((2, n, n_days)) * idio_sd[None, :, None]
    share = how.overnight_share
    overnight = np.sqrt(share) * (pop.beta[:, None] * factor[0][None, :] + idio[0])
    n_t = days_in_month[cal.month_of_day][None, :]
    drift = (np.log1p(pop.expected_ret[:, cal.month_of_day]) - n_t * variance[:, None] / 2.0) / n_t
    if pop.liquidity_beta is not None:  # the month's log return gains b_i x (-eta_t), spread over its days
        drift = drift + (pop.liquidity_beta[:, None] * pop.liquidity_shock[None, :])[:, cal.month_of_day] / n_t
    session_move = np.sqrt(1.0 - share) * (pop.beta[:, None] * factor[1][None, :] + idio[1]) + drift
    close_m = np.log(pop.price0)[:, None] + np.cumsum(overnight + session_move, axis=1)
    open_m = close_m - session_move

    # trade counts and distinct sorted times within each security-day
    counts = rng.poisson(np.broadcast_to(pop.trades_per_day[:, None], (n, n_days))).ravel()
    n_trades = int(counts.sum())
    cell = np.repeat(np.arange(n * n_days, dtype=np.int64), counts)
    first = _segment_starts(counts)
    rank = np.arange(n_trades, dtype=np.int64) - first[cell]
    raw = rng.integers(0, session_us - counts[cell] + 1)
    raw = raw[np.lexsort((raw, cell))]
    offset = raw + rank  # distinct, in [0, session_us)
    tau = offset / session_us
    sec, day = cell // n_days, cell % n_days

    # Brownian path within the session: tau * (session move) + an independent bridge
    session_var = (1.0 - share) * variance[sec]
    traded = counts > 0
    starts, sizes = first[traded], counts[traded]
    step = np.diff(tau, prepend=0.0)
    step[starts] = tau[starts]
    shock = rng.standard_normal(n_trades) * np.sqrt(session_var * step)
    walk = np.cumsum(shock)
    walk -= np.repeat((walk - shock)[starts], sizes)  # restart the walk in every security-day
    last = starts + sizes - 1
    end = walk[last] + rng.standard_normal(len(last)) * np.sqrt(session_var[last] * (1.0 - tau[last]))
    bridge = walk - tau * np.repeat(end, sizes)
    m = open_m.ravel()[cell] + tau * session_move.ravel()[cell] + bridge

    # signs, prices, quotes, sizes
    sign = (rng.integers(0, 2, n_trades) * 2 - 1).astype(np.int8)
    c = pop.half_spread[sec, cal.month_of_day[day]]
    bid, ask = np.exp(m - c), np.exp(m + c)
    if how.tick is not None:
        bid, ask = _round_out(bid, ask, how.tick)
    price = np.where(sign > 0, ask, bid)
    size = how.lot * rng.geometric(1.0 / how.trade_lots, n_trades).astype(np.float64)
    depth = how.lot * rng.geometric(1.0 / how.quote_lots, (2, n_trades)).astype(np.float64)
    ts = _wall_clock(opens, lengths, day, offset)

    trades = _trades_frame(rng, pop.security, sec, ts, price, size, sign, open_us, close_us, day, how)
    quotes = pl.DataFrame(
        {
            "security": _names(pop.security, sec),
            "ts": _utc(ts),
            "bid": bid,
            "ask": ask,
            "bid_size": depth[0],
            "ask_size": depth[1],
        }
    )

    # monthly truth from the good trades
    per_day = counts.reshape(n, n_days)
    month_first = _segment_starts(days_in_month)
    trades_month = np.add.reduceat(per_day, month_first, axis=1)
    days_traded = np.add.reduceat((per_day > 0).astype(np.int64), month_first, axis=1)
    daily_close = np.full(n * n_days, np.nan)
    daily_close[counts > 0] = price[last]
    month_close = _ffill_columns(daily_close.reshape(n, n_days))[:, cal.month_ends]

    key = {
        "security": np.repeat(pop.security, n_months),
        "month": np.tile(cal.months, n),
    }
    truth = pl.DataFrame(
        {
            **key,
            "half_spread": pop.half_spread.ravel(),
            "spread": 2.0 * pop.half_spread.ravel(),
            "sigma_u_daily": np.repeat(pop.daily_vol, n_months),
            "n_trades": trades_month.ravel().astype(np.int64),
            "n_days_traded": days_traded.ravel().astype(np.int64),
            "expected_ret": pop.expected_ret.ravel(),
            **(
                {
                    "liquidity_shock": np.tile(pop.liquidity_shock, n),
                    "liquidity_factor": np.tile(pop.liquidity_factor, n),
                    "liquidity_beta": np.repeat(pop.liquidity_beta, n_months),
                }
                if pop.liquidity_beta is not None else {}
            ),
        }
    )
    ret = np.full((n, n_months), np.nan)
    ret[:, 1:] = month_close[:, 1:] / month_close[:, :-1] - 1.0
    returns = pl.DataFrame({**key, "ret": ret.ravel()}, nan_to_null=True)
    past = np.full((n, n_months), np.nan)
    past[:, 12:] = month_close[:, 12:] / month_close[:, :-12] - 1.0
    market_cap = month_close * pop.shares_out[:, None]
    bm = pop.book_to_market if pop.book_to_market is not None else np.full((n, n_months), np.nan)
    characteristics = pl.DataFrame(
        {
            "security": key["security"],
            "date": np.tile(cal.days[cal.month_ends], n),
            "market_cap": market_cap.ravel(),
            "log_size": np.log(market_cap).ravel(),
            "book_to_market": bm.ravel(),
            "past_ret_12m": past.ravel(),
            "shares_out": np.repeat(pop.shares_out, n_months),
        },
        nan_to_null=True,
    )
    securities = pl.DataFrame(
        {
            "security": pop.security,
            "firm_name": pop.firm_name,
            "shares_out": pop.shares_out,
            "beta": pop.beta,
            "daily_vol": pop.daily_vol,
            "trades_per_day": pop.trades_per_day,
        }
    )
    return Market(
        trades=trades,
        quotes=quotes,
        securities=securities,
        characteristics=characteristics.with_columns(pl.col("date").cast(pl.Date)),
        returns=returns.with_columns(pl.col("month").cast(pl.Date)),
        truth=truth.with_columns(pl.col("month").cast(pl.Date)),
        spec=spec,
    )


def _names(security: np.ndarray, index: np.ndarray) -> pl.Series:
    return pl.Series("security", security, dtype=pl.String).gather(pl.Series(index, dtype=pl.Int64))


def _utc(micros: np.ndarray) -> pl.Series:
    return pl.Series("ts", micros, dtype=pl.Int64).cast(pl.Datetime("us")).dt.replace_time_zone("UTC").cast(UTC)


def _trades_frame(rng, security, sec, ts, price, size, sign, open_us, close_us, day, how: _Trading) -> pl.DataFrame:
    """Good trades plus the planted bad rows, sorted by security and time (good row first on ties)."""
    n_good = len(ts)
    n_bad = int(round(how.bad_row_share * n_good / (1.0 - how.bad_row_share))) if n_good else 0
    source = rng.integers(0, max(n_good, 1), n_bad)
    kind = np.arange(n_bad) % 3  # 0 non-positive, 1 outside the session, 2 duplicate
    variant = (np.arange(n_bad) // 3) % 3
    bad_price, bad_size, bad_ts = price[source].copy(), size[source].copy(), ts[source].copy()
    nonpositive = kind == 0
    bad_price[nonpositive & (variant == 0)] = 0.0
    bad_price[nonpositive & (variant == 1)] *= -1.0
    bad_size[nonpositive & (variant == 2)] = 0.0
    outside = kind == 1
    before = rng.integers(30, 90, n_bad) * _MICROS_PER_MINUTE + rng.integers(0, _MICROS_PER_MINUTE, n_bad)
    after = rng.integers(30, 120, n_bad) * _MICROS_PER_MINUTE + rng.integers(0, _MICROS_PER_MINUTE, n_bad)
    early = rng.integers(0, 2, n_bad) == 0
    moved = np.where(early, open_us[day[source]] - before, close_us[day[source]] + after)
    bad_ts[outside] = moved[outside]
    order = np.lexsort((np.concatenate((np.arange(n_good), n_good + np.arange(n_bad))),
                        np.concatenate((ts, bad_ts)),
                        np.concatenate((sec, sec[source]))))
    all_sec = np.concatenate((sec, sec[source]))[order]
    return pl.DataFrame(
        {
            "security": _names(security, all_sec),
            "ts": _utc(np.concatenate((ts, bad_ts))[order]),
            "price": np.concatenate((price, bad_price))[order],
            "size": np.concatenate((size, bad_size))[order],
            "true_sign": np.concatenate((sign, np.zeros(n_bad, dtype=np.int8)))[order],
        }
    )
