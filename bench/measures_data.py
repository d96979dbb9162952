"""A synthetic daily panel of any size for the measures benchmark.

The panel follows the daily contract (``liqpanel.core.contracts.DAILY``) plus
``shares_out``, so every registered daily measure runs on it. It is drawn
from the Roll (1984) model at the daily frequency, fully vectorised:

- efficient log price: a random walk with daily volatility sigma_i (a share
  ``OVERNIGHT_SHARE`` of the variance between the previous close and the
  open, the rest during the session);
- the day's efficient high and low: the exact maximum and minimum of a
  Brownian bridge from the open to the close (the reflection formula,
  max = (a + b + sqrt((b - a)^2 - 2 s^2 ln U)) / 2);
- observed prices: the open and the close are trades at the bid or the ask
  (log price + c q, q = +-1), the high at the ask and the low at the bid,
  rounded to a one-cent tick (so low-priced securities have zero returns);
- listing: a quarter of the securities list after the first day, and a
  share of days has no trade (no row), as for thinly traded securities.

It is a load generator, not a test of the estimators: the recovery tests use
``liqpanel.simulate``. Fixed seed: the same size gives the same panel.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import polars as pl

OVERNIGHT_SHARE = 0.2
NO_TRADE_SHARE = 0.03
TICK = 0.01
FIRST_DAY = "2015-01-01"
CHUNK_SECURITIES = 500  # securities drawn and written per step, to bound memory


def business_days(years: float) -> np.ndarray:
    """Monday-to-Friday dates from ``FIRST_DAY`` for ``years`` years (252 a year)."""
    n = max(int(round(252 * years)), 2)
    return np.busday_offset(np.datetime64(FIRST_DAY), np.arange(n), roll="forward")


def _securities(rng: np.random.Generator, first: int, n: int, days: int) -> dict[str, np.ndarray]:
    return {
        "name": np.array([f"S{first + i:06d}" for i in range(n)]),
        "half_spread": np.exp(rng.normal(np.log(0.004), 0.8, n)).clip(0.0002, 0.05),
        "sigma": np.exp(rng.normal(np.log(0.02), 0.4, n)).clip(0.005, 0.08),
        "price0": np.exp(rng.uniform(np.log(2.0), np.log(200.0), n)),
        "shares_out": np.round(np.exp(rng.normal(np.log(5e7), 1.0, n))),
        "volume_scale": np.exp(rng.normal(np.log(2e5), 1.0, n)),
        "start": np.where(rng.random(n) < 0.25, rng.integers(0, days, n), 0),
    }


def daily_chunk(rng: np.random.Generator, first: int, n: int, dates: np.ndarray) -> pl.DataFrame:
    """Daily rows of ``n`` securities, named from index ``first`` on."""
    days = len(dates)
    sec = _securities(rng, first, n, days)
    c, sigma = sec["half_spread"][None, :], sec["sigma"][None, :]
    overnight = rng.normal(0.0, 1.0, (days, n)) * sigma * np.sqrt(OVERNIGHT_SHARE)
    session_sd = sigma * np.sqrt(1.0 - OVERNIGHT_SHARE)
    session = rng.normal(0.0, 1.0, (days, n)) * session_sd
    m_close = np.log(sec["price0"])[None, :] + np.cumsum(overnight + session, axis=0)
    m_open = m_close - session
    spread_range = np.sqrt(session**2 - 2.0 * session_sd**2 * np.log(rng.random((days, n))))
    m_high = (m_open + m_close + spread_range) / 2.0
    spread_range = np.sqrt(session**2 - 2.0 * session_sd**2 * np.log(rng.random((days, n))))
    m_low = (m_open + m_close - spread_range) / 2.0
    sign_open = rng.choice([-1.0, 1.0], (days, n))
    sign_close = rng.choice([-1.0, 1.0], (days, n))

    def price(log_price: np.ndarray, rounding) -> np.ndarray:
        return np.maximum(rounding(np.exp(log_price) / TICK) * TICK, TICK)

    open_ = price(m_open + c * sign_open, np.round)
    close = price(m_close + c * sign_close, np.round)
    high = np.maximum(price(m_high + c, np.ceil), np.maximum(open_, close))
    low = np.minimum(price(m_low - c, np.floor), np.minimum(open_, close))
    volume = np.round(sec["volume_scale"][None, :] * rng.lognormal(0.0, 0.5, (days, n)))
    n_trades = 1 + rng.poisson(volume / 500.0).astype(np.int64)
    listed = np.arange(days)[:, None] >= sec["start"][None, :]
    traded = listed & ((rng.random((days, n)) >= NO_TRADE_SHARE) | (np.arange(days)[:, None] == sec["start"][None, :]))
    cols = {
        "security": np.repeat(sec["name"][None, :], days, axis=0),
        "date": np.repeat(dates[:, None], n, axis=1),
        "open": open_, "high": high, "low": low, "close": close,
        "volume": volume, "n_trades": n_trades,
        "shares_out": np.repeat(sec["shares_out"][None, :], days, axis=0),
    }
    # Security-major order (transpose), keeping only the days with a trade.
    keep = traded.T.ravel()
    frame = pl.DataFrame({k: v.T.ravel()[keep] for k, v in cols.items()})
    return frame.with_columns(
        pl.col("date").cast(pl.Date),
        pl.col("date").cast(pl.Date).dt.truncate("1mo").alias("month"),
        (pl.col("close") * pl.col("volume")).alias("dollar_volume"),
        (pl.col("close") / pl.col("close").shift(1).over("security") - 1.0).alias("ret"),
    ).select("security", "date", "month", "open", "high", "low", "close", "volume", "dollar_volume",
             "n_trades", "ret", "shares_out")


def write_panel(path: str | Path, securities: int, years: float, seed: int = 20240601) -> Path:
    """Write the synthetic panel to one Parquet file, security-major and date-sorted within a security."""
    import pyarrow.parquet as pq

    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    dates = business_days(years)
    rng = np.random.default_rng(seed)
    writer = None
    try:
        for first in range(0, securities, CHUNK_SECURITIES):
            n = min(CHUNK_SECURITIES, securities - first)
            table = daily_chunk(rng, first, n, dates).to_arrow()
            if writer is None:
                writer = pq.ParquetWriter(path, table.schema)
            writer.write_table(table)
    finally:
        if writer is not None:
            writer.close()
    return path


__all__ = ["business_days", "daily_chunk", "write_panel"]
