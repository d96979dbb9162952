"""The bars stage: clean trades (and quotes) in, one row per security and trading day out.

- ``daily``: open, high, low, close, volume and returns of each trading day, and
  the columns the selected measures read (:func:`intraday_bars`);
- ``intraday``: the high-frequency benchmarks (signed trades, quoted,
  effective and realized spreads, price impact, realized variance) and the
  prevailing quote of each trade, which the clean stage also uses;
- ``signing``: the trade-sign rules;
- ``daily_file``: the same daily table from a user's own daily file, read,
  checked and audited.
"""

from __future__ import annotations

from liqpanel.bars.daily import (
    BAR_COLUMNS_OF, BAR_OPTIONS, READS_NO_BAR_COLUMN, add_returns, daily_bars, intraday_bars, needed_columns,
    trading_bars,
)

__all__ = [
    "BAR_COLUMNS_OF", "BAR_OPTIONS", "READS_NO_BAR_COLUMN", "add_returns", "daily_bars", "intraday_bars",
    "needed_columns", "trading_bars",
]
