"""The simulator's parameters (``SimulationSpec``) and the tables it returns (``Market``)."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import polars as pl

from liqpanel.core.errors import ConfigError
from liqpanel.simulate.calendar import _month_start, _session_minutes
from liqpanel.simulate.names import _HEADS, _KINDS, _MIDS, _TAILS


UTC = pl.Datetime("us", "UTC")
TABLES = ("trades", "quotes", "securities", "characteristics", "returns", "truth")


@dataclass(frozen=True)
class SimulationSpec:
    """Every parameter of the invented market (see the package docstring, ``liqpanel.simulate``).

    Units: proportions for spreads, volatilities and returns (0.01 = 1%);
    volatilities and intensities per business day; sizes in shares; market
    capitalisation in currency units.
    """

    n_securities: int = 40
    n_months: int = 24
    seed: int = 20240101
    start: str = "2021-01"  # first month, "YYYY-MM"
    tz: str = "America/New_York"
    session: tuple[str, str] = ("09:10", "15:40")  # local open and close, "HH:MM"
    # size and price
    size_median: float = 1.0e9  # median market capitalisation, currency units
    size_dispersion: float = 1.5  # standard deviation of log market capitalisation
    price_range: tuple[float, float] = (5.0, 150.0)  # initial price, log-uniform
    # market factor
    market_vol: float = 0.008  # daily standard deviation of the common factor
    beta_mean: float = 1.0
    beta_sd: float = 0.3
    max_market_share: float = 0.9  # largest share of a security's daily variance due to the factor
    # efficient-price volatility (daily)
    vol_center: float = 0.02  # at median size
    vol_size_slope: float = 0.15  # change of log volatility per standard deviation of log size
    vol_dispersion: float = 0.2  # idiosyncratic log standard deviation
    vol_range: tuple[float, float] = (0.01, 0.04)
    overnight_share: float = 0.0  # share of daily efficient variance between sessions
    # trading intensity (mean trades per day)
    intensity_center: float = 7.0  # at median size
    intensity_size_slope: float = 0.8  # change of log intensity per standard deviation of log size
    intensity_dispersion: float = 0.3
    intensity_range: tuple[float, float] = (2.0, 80.0)
    lot: float = 100.0  # shares per lot
    trade_lots: float = 3.0  # mean trade size in lots (geometric)
    quote_lots: float = 5.0  # mean quoted depth in lots (geometric)
    # half-spread c (proportional)
    spread_level: float = 0.004  # median half-spread at median size
    spread_size_slope: float = 0.5  # fall of log c per standard deviation of log size
    spread_persistence: float = 0.8  # monthly AR(1) coefficient of log c
    spread_dispersion: float = 0.3  # stationary standard deviation of the AR(1) part of log c
    half_spread_range: tuple[float, float] = (0.0005, 0.03)
    tick: float | None = None  # price grid in currency units; None = no rounding
    # planted premium: expected monthly return = premium_base + premium_slope * previous spread
    premium_base: float = 0.005
    premium_slope: float = 2.0
    # planted market-wide liquidity: common AR(1) factor in log half-spreads, return exposure to its shocks
    liquidity_shock_sd: float = 0.0  # monthly innovation sd of the common log half-spread factor
    liquidity_persistence: float = 0.5  # its monthly AR(1) coefficient
    liquidity_beta_mean: float = 0.0  # mean return loading on the liquidity innovation (-eta)
    liquidity_beta_sd: float = 0.0  # cross-sectional sd of that loading
    # book-to-market
    bm_median: float = 0.6
    bm_dispersion: float = 0.6
    bm_persistence: float = 0.9  # yearly AR(1) coefficient of log book-to-market
    # planted bad rows, share of the trades table
    bad_row_share: float = 0.0
    # a second market (off by default): its own securities, clock, holidays, tick and currency
    second_securities: int = 0  # securities of the second market; 0 = one market only
    second_profile: str = "gullwing"  # market profile (shipped name or path) the second market trades on
    market_codes: tuple[str, str] = ("HBR", "GUL")  # the securities' `market` codes of the two markets
    fx_start: float = 0.42  # units of the first market's currency per unit of the second's, first day
    fx_vol: float = 0.003  # daily standard deviation of the log exchange rate
    # overrides used by recovery tests: when not None they pin the value for every security
    half_spread: float | None = None
    daily_vol: float | None = None
    trades_per_day: float | None = None

    def __post_init__(self) -> None:
        def bad(name: str, rule: str) -> ConfigError:
            return ConfigError(f"simulation parameter '{name}' = {getattr(self, name)!r}: {rule}")

        if not isinstance(self.n_securities, (int, np.integer)) or self.n_securities < 1:
            raise bad("n_securities", "expected a positive integer")
        if self.n_securities > len(_HEADS) * len(_MIDS) * len(_TAILS) * len(_KINDS):
            raise bad("n_securities", "more securities than invented firm names")
        if not isinstance(self.n_months, (int, np.integer)) or self.n_months < 1:
            raise bad("n_months", "expected a positive integer")
        _month_start(self.start, "start")
        _session_minutes(self.session)
        for name in ("size_median", "market_vol", "vol_center", "intensity_center", "spread_level",
                     "lot", "bm_median"):
            if not getattr(self, name) > 0 and not (name == "market_vol" and self.market_vol == 0):
                raise bad(name, "expected a positive number")
        for name in ("trade_lots", "quote_lots"):
            if not getattr(self, name) >= 1:
                raise bad(name, "expected a mean of at least one lot")
        for name in ("size_dispersion", "beta_sd", "vol_dispersion", "intensity_dispersion",
                     "spread_dispersion", "bm_dispersion"):
            if not getattr(self, name) >= 0:
                raise bad(name, "expected a non-negative number")
        for name in ("price_range", "vol_range", "intensity_range", "half_spread_range"):
            lo, hi = getattr(self, name)
            if not 0 < lo <= hi:
                raise bad(name, "expected (low, high) with 0 < low <= high")
        for name in ("liquidity_shock_sd", "liquidity_beta_sd"):
            if not getattr(self, name) >= 0:
                raise bad(name, "expected a non-negative number")
        for name in ("spread_persistence", "bm_persistence", "liquidity_persistence"):
            if not -1 < getattr(self, name) < 1:
                raise bad(name, "expected a value strictly between -1 and 1")
        for name in ("overnight_share", "max_market_share"):
            if not 0 <= getattr(self, name) <= 1:
                raise bad(name, "expected a share between 0 and 1")
        if not 0 <= self.bad_row_share < 0.5:
            raise bad("bad_row_share", "expected a share in [0, 0.5)")
        if self.tick is not None and not self.tick > 0:
            raise bad("tick", "expected a positive price increment or None")
        if not isinstance(self.second_securities, (int, np.integer)) or self.second_securities < 0:
            raise bad("second_securities", "expected a non-negative integer (0: one market only)")
        if self.n_securities + self.second_securities > len(_HEADS) * len(_MIDS) * len(_TAILS) * len(_KINDS):
            raise bad("second_securities", "more securities in the two markets than invented firm names")
        codes = self.market_codes
        if len(codes) != 2 or len(set(codes)) != 2 or not all(isinstance(c, str) and c for c in codes):
            raise bad("market_codes", "expected two distinct non-empty codes")
        if not self.fx_start > 0:
            raise bad("fx_start", "expected a positive exchange rate")
        if not self.fx_vol >= 0:
            raise bad("fx_vol", "expected a non-negative daily volatility")
        if self.half_spread is not None and not 0 <= self.half_spread < 1:
            raise bad("half_spread", "expected a proportion in [0, 1)")
        if self.daily_vol is not None and not self.daily_vol >= 0:
            raise bad("daily_vol", "expected a non-negative daily volatility")
        if self.trades_per_day is not None and not self.trades_per_day >= 0:
            raise bad("trades_per_day", "expected a non-negative mean number of trades per day")


@dataclass(frozen=True)
class Market:
    """The simulated tables, each a polars DataFrame sorted by its key.

    - trades: security, ts, price, size, true_sign (+1 buy, -1 sell, 0 bad row)
    - quotes: security, ts, bid, ask, bid_size, ask_size
    - securities: security, firm_name, shares_out, beta, daily_vol, trades_per_day
    - characteristics: security, date, market_cap, log_size, book_to_market,
      past_ret_12m, shares_out
    - returns: security, month, ret
    - truth: security, month, half_spread, spread, sigma_u_daily, n_trades,
      n_days_traded, expected_ret
    - fx (with a second market only): date, currency, rate (units of the
      first market's currency per unit of ``currency``); the securities
      then carry ``market``
    """

    trades: pl.DataFrame
    quotes: pl.DataFrame
    securities: pl.DataFrame
    characteristics: pl.DataFrame
    returns: pl.DataFrame
    truth: pl.DataFrame
    fx: pl.DataFrame | None = None
    spec: SimulationSpec | None = field(default=None, compare=False)

    def tables(self) -> dict[str, pl.DataFrame]:
        tables = {name: getattr(self, name) for name in TABLES}
        return tables if self.fx is None else {**tables, "fx": self.fx}
