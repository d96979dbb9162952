"""An invented market with known truth: the Roll (1984) model traded intraday.

Source of the model: Roll, R. (1984), "A simple implicit measure of the
effective bid-ask spread in an efficient market", Journal of Finance 39,
1127-1139 (citation from memory).

The simulator feeds the demo data, the recovery test of every estimator and
simulation studies. Everything it writes follows the table contracts of
``liqpanel.contracts``; the columns it adds (``true_sign`` in the trades) are
ignored by the pipeline.

Model (units: prices in the market's currency, spreads and returns as
proportions, 0.01 = 1%; "daily" means one business day)
--------------------------------------------------------------------------
Calendar. Business days Monday to Friday without holidays, from the first
day of ``start`` for ``n_months`` calendar months; one session per day
(default 09:10-15:40 in ``tz``, an invented clock). Timestamps are stored in UTC, microseconds.
The session must not contain a daylight-saving change (true for every market
whose clocks change at night).

Securities. For security i: market capitalisation log-normal (median
``size_median``, log standard deviation ``size_dispersion``); standardised
log size z_i = (log cap_i - log size_median) / size_dispersion; initial price
log-uniform on ``price_range``; shares outstanding = cap / price, constant;
market beta ~ N(``beta_mean``, ``beta_sd``) clipped to [0.2, 2.0] and to at
most ``max_market_share`` of the security's daily variance; daily
efficient-price volatility sigma_i = exp(log ``vol_center`` -
``vol_size_slope`` z_i + ``vol_dispersion`` e_i) clipped to ``vol_range``
(falls mildly with size); trade intensity lambda_i (mean trades per day) =
exp(log ``intensity_center`` + ``intensity_size_slope`` z_i +
``intensity_dispersion`` e'_i) clipped to ``intensity_range`` (rises with
size, so small securities have days without a trade).

Half-spread (proportional, per security-month):
    log c_it = log ``spread_level`` - ``spread_size_slope`` z_i + x_it,
    x_it = ``spread_persistence`` x_i,t-1 + innovation,
with x stationary with standard deviation ``spread_dispersion``; c is clipped
to ``half_spread_range``. The spread is 2c. The quoted proportional spread
(ask - bid)/midpoint is 2 tanh(c), which differs from 2c by less than
(2/3)c^3 (1.8e-5 at c = 3%).

Efficient log price m (Roll 1984: the efficient price is a random walk). The
daily efficient log return is beta_i f_d + e_id with total variance
sigma_i^2, f_d the common market factor (daily standard deviation
``market_vol``), e_id idiosyncratic. A share ``overnight_share`` of the
daily variance falls between sessions (a jump from the previous close to the
open); the rest is a Brownian motion in session time, so the efficient
variance between two trades is proportional to the session time between
them. With the default ``overnight_share = 0`` the sessions join without a
gap, trade times form a Poisson process in session time, and the efficient
increments between consecutive trades are uncorrelated with mean (about)
zero and variance sigma_i^2 / lambda_i: the Roll identities
Var(dp) = 2c^2 + sigma_u^2, Cov(dp_t, dp_t-1) = -c^2 hold trade by trade
with sigma_u^2 = sigma_i^2 / lambda_i. The monthly drift (below) accrues linearly
over the sessions of the month.

Trades. The number of trades of a security-day is Poisson(lambda_i); the
times are uniform within the session (microsecond grid, distinct within a
security-day), sorted. Each trade is a buy (q = +1) or a sell (q = -1) with
probability 1/2, independently of everything else; log price = m(t) + q c.
Trade size = ``lot`` x Geometric(mean ``trade_lots``). With a ``tick`` the
quotes are rounded outwards (bid down, ask up, bid at least one tick) and a
buy executes at the ask, a sell at the bid, so a trade price is always a
quote. The true sign is kept in ``true_sign``.

Quotes. One quote at every trade time: bid = exp(m - c), ask = exp(m + c),
so log midpoint = m (without a tick) and the effective spread
2 q (p - mid)/mid = 2 tanh(c). Quote sizes = ``lot`` x Geometric(mean
``quote_lots``).

Planted liquidity premium (the truth a cross-sectional test should find).
The expected simple return of the efficient price over month t is
    mu_it = ``premium_base`` + ``premium_slope`` x spread_i,t-1
(month 1 uses its own spread). It is planted as a drift in the efficient log
price of (log(1 + mu_it) - n_t sigma_i^2 / 2) / n_t per day for the n_t days
of the month, so E[M_end / M_start] = 1 + mu_it exactly (log-normal mean).
The market factor has mean zero. Defaults: base 0.5% a month, slope 2 (a 1%
spread in month t adds 2% to the expected return of month t+1). With the
default spread and volatility dispersion, a Fama & MacBeth (1973) regression
of the monthly return (``returns``) on the previous month's true spread over
40 securities x 24 months (default spec, seeds 20240001-20240200, measured
with this module) gave a positive slope in 200 of 200 seeds, a mean slope of
1.98 and a t-statistic above 2 in 170 of 200 (mean 3.1; plain Fama-MacBeth
standard errors). The default seed 20240101 gives slope 1.78, t = 2.26.

Planted market-wide liquidity (off by default; the demo turns it on). A
common monthly factor F_t in every security's log half-spread,
    log c_it += F_t,  F_t = ``liquidity_persistence`` F_t-1 + eta_t,
    eta_t ~ N(0, ``liquidity_shock_sd``^2)
(F stationary from the first month), moves all spreads together; c is
clipped after the factor is added. Returns load on the unexpected part:
the month's efficient log return gains b_i x (-eta_t), b_i ~
N(``liquidity_beta_mean``, ``liquidity_beta_sd``^2), so a security with
b_i > 0 falls when spreads widen unexpectedly (liquidity improves when
-eta_t > 0). The truth keeps ``liquidity_shock`` (-eta_t: the planted
liquidity innovation, positive = more liquid), ``liquidity_factor`` (F_t)
and ``liquidity_beta`` (b_i). These draws come from their own stream
(seeded by ``seed``), so switching the factor on or off leaves every other
draw unchanged, and with both scales at zero the market is the one without it.

Characteristics (one row per security and month, dated the last business
day): market_cap = month-end close x shares_out; log_size = ln(market_cap)
(currency units); book_to_market log-normal (median ``bm_median``, log
standard deviation ``bm_dispersion``), changing once a year in January with
yearly persistence ``bm_persistence`` of its log, independent of the other
characteristics and unpriced; past_ret_12m = close_t / close_{t-12} - 1 (null
before 12 months of history). The month-end close is the last good trade at
or before the month end, carried forward over months without a trade.

Returns: simple monthly return between consecutive month-end closes (null in
the first month), as a user would supply it.

Bad rows (``bad_row_share``, a share of the final trades table): in equal
parts (i) a non-positive price (0 or minus the price) or a zero size,
(ii) a time outside the session (30-90 minutes before the open or 30-120
minutes after the close), (iii) exact duplicates of a good trade. Each copies
a randomly chosen good trade and carries ``true_sign = 0``. Truth, returns
and characteristics use good trades only; quotes exist at good trade times
only.

A second market (off by default: ``second_securities`` = 0). With
``second_securities`` = k > 0, k more securities trade on the market profile
``second_profile`` (default ``gullwing``, an invented exchange): its time
zone, its sessions (a midday break carries no efficient-price variance:
trading time joins the sessions, so the Roll identities hold as before), its
open days (business days less the profile's ``holidays``: no trade and no
quote on a closed day), its ``tick_size`` (quotes rounded outwards, trades
at a quote, so every price is on the grid) and its currency (prices,
capitalisations, dollar volumes). Each table then holds both markets, the
securities gain ``market`` (``market_codes``, default HBR for the first
market, GUL for the second), and ``fx`` holds invented daily rates of the
second market's currency in the first's (date, currency, rate = units of
the first market's currency per unit of ``currency``) on every open day of
either market: log rate a random walk from ``fx_start`` with daily standard
deviation ``fx_vol``. The second market's draws come from streams of their
own (``[seed, 2]`` and, for the rates, ``[seed, 4217]``), so the first
market's tables are byte-identical to those of the spec without it. With a
tick the effective spread exceeds the model's 2c: rounding each quote
outwards adds about one tick to ask - bid, i.e. tick / price to the
proportional spread (the truth keeps the model's 2c).

Reproducibility: one ``numpy.random.default_rng(seed)`` stream drives every
draw; the same spec gives identical tables, and pinning a parameter
(``half_spread``, ``daily_vol``, ``trades_per_day``) does not change the
other draws (apart from the beta cap, which depends on the volatility).
Everything is vectorised across securities and days; only the AR(1) spread
path and the yearly book-to-market path loop over time, and the resolution of
ticker clashes loops over names.
"""

from __future__ import annotations

import gzip

import dataclasses
from dataclasses import dataclass, field
from datetime import timedelta
from pathlib import Path

import numpy as np
import polars as pl

from liqpanel.errors import ConfigError

UTC = pl.Datetime("us", "UTC")
TABLES = ("trades", "quotes", "securities", "characteristics", "returns", "truth")
_MICROS_PER_MINUTE = 60_000_000
_LETTERS = "ABCDEFGHIJKLMNOPQRSTUVWXYZ"
# Every simulated security's identifier starts with this lower-case prefix, a
# form no exchange gives its symbols, so an invented code can never be read as
# a real listing even when its letters happen to match one.
SECURITY_PREFIX = "sim-"

# Invented syllables for firm names; the two-syllable stems were read through
# once by hand to keep well-known company names out.
_HEADS = (
    "Brel", "Cadr", "Dorv", "Vosk", "Grel", "Halv", "Jorr", "Kest", "Lunv", "Morr", "Nesk",
    "Orv", "Pell", "Quor", "Rask", "Selv", "Torv", "Ulm", "Varr", "Yssel", "Zorn", "Thrend",
)
_MIDS = ("", "an", "ir", "ol", "ev")
_TAILS = ("ane", "ica", "ora", "ex", "ith", "ova", "und", "ael", "yn", "aro", "esk", "ium", "olt", "ara", "ent")
_KINDS = (
    "Holdings", "Works", "Group", "Industries", "Partners", "Trading", "Foods", "Mining", "Logistics", "Textiles",
)


@dataclass(frozen=True)
class SimulationSpec:
    """Every parameter of the invented market (see the module docstring).

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


# --------------------------------------------------------------------------
# calendar and session


def _month_start(text: str, name: str) -> np.datetime64:
    try:
        month = np.datetime64(text, "M")
    except (ValueError, TypeError):
        raise ConfigError(f"simulation parameter '{name}' = {text!r}: expected a month 'YYYY-MM'") from None
    if len(str(text)) != 7:
        raise ConfigError(f"simulation parameter '{name}' = {text!r}: expected a month 'YYYY-MM'")
    return month


def _session_minutes(session) -> tuple[int, int]:
    try:
        open_, close = session
        minutes = []
        for text in (open_, close):
            hh, mm = str(text).split(":")
            hh, mm = int(hh), int(mm)
            if not (0 <= hh < 24 and 0 <= mm < 60):
                raise ValueError
            minutes.append(60 * hh + mm)
    except (ValueError, TypeError):
        raise ConfigError(f"simulation parameter 'session' = {session!r}: expected ('HH:MM', 'HH:MM')") from None
    if minutes[1] <= minutes[0]:
        raise ConfigError(f"simulation parameter 'session' = {session!r}: the close must follow the open")
    return minutes[0], minutes[1]


@dataclass(frozen=True)
class _Calendar:
    days: np.ndarray  # datetime64[D], business days in order
    month_of_day: np.ndarray  # index into months
    months: np.ndarray  # datetime64[D], first day of each month touched

    @property
    def month_ends(self) -> np.ndarray:
        """Index of the last day of each month."""
        return np.searchsorted(self.month_of_day, np.arange(len(self.months)), side="right") - 1


def _calendar(days: np.ndarray) -> _Calendar:
    month = days.astype("datetime64[M]")
    months, month_of_day = np.unique(month, return_inverse=True)
    return _Calendar(days=days, month_of_day=month_of_day.astype(np.int64), months=months.astype("datetime64[D]"))


def _business_days(first: np.datetime64, end: np.datetime64) -> np.ndarray:
    days = np.arange(first, end, dtype="datetime64[D]")
    return days[np.is_busday(days)]


def _sessions_utc(days: np.ndarray, tz: str, sessions) -> tuple[np.ndarray, np.ndarray]:
    """UTC microseconds of each session's open on each day, shape (sessions, days), and each session's length."""
    bounds = [_session_minutes(session) for session in sessions]
    if any(later[0] <= earlier[1] for earlier, later in zip(bounds, bounds[1:])):
        raise ConfigError(f"simulation sessions {tuple(sessions)!r}: each session must open after the previous closes")
    opens, lengths = [], []
    for session, (open_min, close_min) in zip(sessions, bounds):
        local = pl.Series("open", days.astype("datetime64[us]")) + timedelta(minutes=open_min)
        try:
            utc = local.dt.replace_time_zone(tz, ambiguous="raise", non_existent="raise").dt.convert_time_zone("UTC")
        except Exception as exc:  # polars raises its own error types for unknown zones
            raise ConfigError(
                f"simulation parameters 'tz' = {tz!r}, 'session' = {tuple(session)!r}: the session open is not a "
                f"valid local time on every business day ({exc})"
            ) from None
        opens.append(utc.dt.epoch("us").to_numpy())
        lengths.append((close_min - open_min) * _MICROS_PER_MINUTE)
    return np.stack(opens), np.array(lengths, dtype=np.int64)


def _wall_clock(opens: np.ndarray, lengths: np.ndarray, day: np.ndarray, offset: np.ndarray) -> np.ndarray:
    """UTC microseconds of an ``offset`` into the day's trading time (the sessions joined, breaks left out)."""
    if len(lengths) == 1:
        return opens[0][day] + offset
    starts = np.cumsum(lengths) - lengths
    k = np.searchsorted(starts, offset, side="right") - 1
    return opens[k, day] + (offset - starts[k])


# --------------------------------------------------------------------------
# the engine


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


# --------------------------------------------------------------------------
# invented names


def security_code(letters: str) -> str:
    """The identifier of a simulated security: ``SECURITY_PREFIX`` + its letters."""
    return SECURITY_PREFIX + letters


def _tickers(firm_names: np.ndarray, taken: set[str] | frozenset = frozenset()) -> np.ndarray:
    """Distinct identifiers abbreviating the invented names, e.g. ``sim-BRLN``.

    The letters are the stem's first letter followed by its next consonants
    (3 or 4 upper-case letters in all, padded with the initial of the kind of
    business when the stem has fewer than three); letters already taken get
    their last one replaced by the kind's initial, then by A, B, C, ... until
    free. Every identifier carries ``SECURITY_PREFIX`` (see
    :func:`security_code`); the prefix does not change the sort order.
    ``taken``: identifiers already in use (another market's).
    """
    taken = {code.removeprefix(SECURITY_PREFIX) for code in taken}
    out = []
    for name in firm_names.tolist():
        stem, kind = name.upper().split(" ", 1)
        skeleton = stem[0]
        for ch in stem[1:]:
            if ch not in "AEIOUY" and ch != skeleton[-1]:
                skeleton += ch
        skeleton = (skeleton + kind[0] * 2)[: max(3, min(4, len(skeleton)))]
        candidates = [skeleton, skeleton[:-1] + kind[0]] + [skeleton[:-1] + chr(ord("A") + k) for k in range(26)]
        if len(skeleton) == 3:
            candidates += [skeleton + chr(ord("A") + k) for k in range(26)]
        ticker = next((c for c in candidates if c not in taken), None)
        if ticker is None:  # only in markets far larger than any test or demo
            ticker = next(a + b + c + d for a in skeleton[:1] for b in _LETTERS for c in _LETTERS for d in _LETTERS
                          if a + b + c + d not in taken)
        taken.add(ticker)
        out.append(security_code(ticker))
    return np.array(out)


def _firm_names(rng: np.random.Generator, n: int) -> np.ndarray:
    """n distinct invented firm names: stem of invented syllables + a kind of business."""
    sizes = (len(_HEADS), len(_MIDS), len(_TAILS), len(_KINDS))
    # two-syllable stems first (hand-checked), three-syllable ones only for large markets
    two = np.arange(sizes[0] * sizes[2] * sizes[3])
    pick = rng.permutation(two)[:n]
    if n > len(two):
        rest = rng.permutation(np.arange(sizes[0] * (sizes[1] - 1) * sizes[2] * sizes[3]))[: n - len(two)]
        pick = np.concatenate((pick, len(two) + rest))
    two_syllables = pick < len(two)
    code = np.where(two_syllables, pick, pick - len(two))
    per_head = np.where(two_syllables, sizes[2] * sizes[3], (sizes[1] - 1) * sizes[2] * sizes[3])
    head, rest = np.divmod(code, per_head)
    mid = np.where(two_syllables, 0, rest // (sizes[2] * sizes[3]) + 1)
    tail, kind = np.divmod(rest % (sizes[2] * sizes[3]), sizes[3])
    stem = np.char.add(np.char.add(np.array(_HEADS)[head], np.array(_MIDS)[mid]), np.array(_TAILS)[tail])
    return np.char.add(np.char.add(stem, " "), np.array(_KINDS)[kind])


# --------------------------------------------------------------------------
# public entry points


def _population(
    rng: np.random.Generator, spec: SimulationSpec, cal: _Calendar, taken: pl.DataFrame | None = None
) -> _Population:
    """The securities of one market; ``taken``: securities (firm_name, security) of another market to avoid."""
    n, n_months = spec.n_securities, len(cal.months)
    if taken is None:
        firms = _firm_names(rng, n)
    else:
        firms = _firm_names(rng, n + taken.height)
        firms = firms[~np.isin(firms, taken["firm_name"].to_numpy())][:n]
    tickers = _tickers(firms, taken=set() if taken is None else set(taken["security"].to_list()))
    log_cap = rng.normal(np.log(spec.size_median), spec.size_dispersion, n)
    z = (log_cap - np.log(spec.size_median)) / spec.size_dispersion if spec.size_dispersion > 0 else np.zeros(n)
    lo, hi = np.log(spec.price_range)
    price0 = np.exp(rng.uniform(lo, hi, n))
    shares = np.maximum(np.round(np.exp(log_cap) / price0), 1.0)
    beta = np.clip(rng.normal(spec.beta_mean, spec.beta_sd, n), 0.2, 2.0)
    vol = np.clip(
        np.exp(np.log(spec.vol_center) - spec.vol_size_slope * z + spec.vol_dispersion * rng.standard_normal(n)),
        *spec.vol_range,
    )
    intensity = np.clip(
        np.exp(
            np.log(spec.intensity_center)
            + spec.intensity_size_slope * z
            + spec.intensity_dispersion * rng.standard_normal(n)
        ),
        *spec.intensity_range,
    )
    # AR(1) in log half-spread over months, started from its stationary law
    rho, sd = spec.spread_persistence, spec.spread_dispersion
    shocks = rng.standard_normal((n, n_months))
    path = np.empty((n, n_months))
    path[:, 0] = sd * shocks[:, 0]
    for t in range(1, n_months):
        path[:, t] = rho * path[:, t - 1] + sd * np.sqrt(1.0 - rho**2) * shocks[:, t]
    common, shock, liq_beta = _liquidity_factor(spec, n, n_months)
    half = np.clip(
        np.exp(np.log(spec.spread_level) - spec.spread_size_slope * z[:, None] + path + common[None, :]),
        *spec.half_spread_range,
    )
    # book-to-market: yearly AR(1) in logs, new value each January
    year = cal.months.astype("datetime64[Y]").astype(np.int64)
    year_index = year - year[0]
    n_years = int(year_index[-1]) + 1
    bm_shocks = rng.standard_normal((n, n_years))
    bm_path = np.empty((n, n_years))
    bm_path[:, 0] = spec.bm_dispersion * bm_shocks[:, 0]
    for y in range(1, n_years):
        bm_path[:, y] = spec.bm_persistence * bm_path[:, y - 1] + spec.bm_dispersion * np.sqrt(
            1.0 - spec.bm_persistence**2
        ) * bm_shocks[:, y]
    book_to_market = spec.bm_median * np.exp(bm_path[:, year_index])

    if spec.half_spread is not None:
        half = np.full((n, n_months), float(spec.half_spread))
    if spec.daily_vol is not None:
        vol = np.full(n, float(spec.daily_vol))
    if spec.trades_per_day is not None:
        intensity = np.full(n, float(spec.trades_per_day))
    if spec.market_vol > 0:
        beta = np.minimum(beta, np.sqrt(spec.max_market_share) * vol / spec.market_vol)
    previous = np.concatenate((half[:, :1], half[:, :-1]), axis=1)
    expected = spec.premium_base + spec.premium_slope * 2.0 * previous

    order = np.argsort(tickers, kind="stable")
    return _Population(
        security=tickers[order],
        firm_name=firms[order],
        shares_out=shares[order],
        price0=price0[order],
        beta=beta[order],
        daily_vol=vol[order],
        trades_per_day=intensity[order],
        half_spread=half[order],
        expected_ret=expected[order],
        book_to_market=book_to_market[order],
        liquidity_shock=shock if liq_beta is not None else None,
        liquidity_factor=common if liq_beta is not None else None,
        liquidity_beta=liq_beta[order] if liq_beta is not None else None,
    )


def _liquidity_factor(spec: SimulationSpec, n: int, n_months: int):
    """The planted common liquidity factor F_t, the innovation -eta_t and the loadings b_i.

    From a stream of its own (so the rest of the market's draws do not move);
    all zeros and ``None`` loadings when the factor is off.
    """
    if spec.liquidity_shock_sd == 0 and spec.liquidity_beta_mean == 0 and spec.liquidity_beta_sd == 0:
        return np.zeros(n_months), np.zeros(n_months), None
    rng = np.random.default_rng([spec.seed, 2003])
    rho, sd = spec.liquidity_persistence, spec.liquidity_shock_sd
    eta = rng.standard_normal(n_months) * sd
    common = np.empty(n_months)
    common[0] = eta[0] / np.sqrt(1.0 - rho**2)  # stationary start
    for t in range(1, n_months):
        common[t] = rho * common[t - 1] + eta[t]
    beta = spec.liquidity_beta_mean + spec.liquidity_beta_sd * rng.standard_normal(n)
    return common, -eta, beta


def simulate_market(spec: SimulationSpec | None = None, **overrides) -> Market:
    """Simulate the invented market described in the module docstring.

    ``overrides`` replace fields of ``spec`` (or of the default spec), e.g.
    ``simulate_market(n_securities=5, half_spread=0.002)``.
    """
    spec = spec if spec is not None else SimulationSpec()
    if overrides:
        valid = {f.name for f in dataclasses.fields(SimulationSpec)}
        unknown = sorted(set(overrides) - valid)
        if unknown:
            raise ConfigError(
                f"unknown simulation parameter '{unknown[0]}'; valid names are: {', '.join(sorted(valid))}"
            )
        spec = dataclasses.replace(spec, **overrides)
    first = _month_start(spec.start, "start")
    cal = _calendar(_business_days(first.astype("datetime64[D]"), (first + spec.n_months).astype("datetime64[D]")))
    rng = np.random.default_rng(spec.seed)
    pop = _population(rng, spec, cal)
    how = _Trading(
        market_vol=spec.market_vol,
        overnight_share=spec.overnight_share,
        tick=spec.tick,
        bad_row_share=spec.bad_row_share,
        tz=spec.tz,
        sessions=(tuple(spec.session),),
        lot=spec.lot,
        trade_lots=spec.trade_lots,
        quote_lots=spec.quote_lots,
    )
    market = _run(rng, pop, cal, how, spec)
    return _with_second_market(market, spec, cal) if spec.second_securities else market


def second_market_profile(spec: SimulationSpec) -> dict:
    """The checked market profile the second market trades on (``spec.second_profile``)."""
    from liqpanel.config import load_market

    profile = load_market(spec.second_profile)
    if profile["_half_days"]:
        raise ConfigError(f"simulation parameter 'second_profile' = {spec.second_profile!r}: the simulator does not "
                          "model half days; use a profile without half_days")
    if not profile.get("currency"):
        raise ConfigError(f"simulation parameter 'second_profile' = {spec.second_profile!r}: the profile names no "
                          "currency; the exchange rates need one (e.g. currency: ZZG)")
    if any(t.second for session in profile["_sessions"] for t in session):
        raise ConfigError(f"simulation parameter 'second_profile' = {spec.second_profile!r}: session times with "
                          "seconds are not simulated; give them as 'HH:MM'")
    return profile


def _with_second_market(first: Market, spec: SimulationSpec, first_cal: _Calendar) -> Market:
    """``first`` plus a second market of ``spec.second_securities`` securities on ``spec.second_profile``.

    The second market has its own draws (a stream seeded by ``[seed, 2]``), so
    the first market's tables are those of the spec without it. It trades on
    the profile's time zone, sessions (a break between two sessions carries
    no efficient-price variance: trading time joins the sessions) and open
    days (business days less the profile's holidays), with prices on the
    profile's tick grid; its prices, capitalisations and volumes are in the
    profile's currency. The planted liquidity factor is common to both
    markets (the same stream). The ``fx`` table holds the rate of the second
    market's currency in the first's on every open day of either market.
    """
    profile = second_market_profile(spec)
    holidays = np.array(profile["_holidays"], dtype="datetime64[D]")
    days = first_cal.days[~np.isin(first_cal.days, holidays)]
    cal = _calendar(days)
    if len(cal.months) != len(first_cal.months):
        raise ConfigError(f"simulation parameter 'second_profile' = {spec.second_profile!r}: its holidays close a "
                          "whole month of the sample")
    rng = np.random.default_rng([spec.seed, 2])
    own = dataclasses.replace(spec, n_securities=spec.second_securities)
    pop = _population(rng, own, cal, taken=first.securities.select("firm_name", "security"))
    how = _Trading(
        market_vol=spec.market_vol,
        overnight_share=spec.overnight_share,
        tick=profile.get("tick_size"),
        bad_row_share=spec.bad_row_share,
        tz=profile["timezone"],
        sessions=tuple((f"{o:%H:%M}", f"{c:%H:%M}") for o, c in profile["_sessions"]),
        lot=spec.lot,
        trade_lots=spec.trade_lots,
        quote_lots=spec.quote_lots,
    )
    second = _run(rng, pop, cal, how)
    codes = spec.market_codes

    def joined(name: str, key: list[str]) -> pl.DataFrame:
        a, b = getattr(first, name), getattr(second, name)
        if name == "securities":
            a, b = (t.with_columns(pl.lit(code).alias("market")) for t, code in zip((a, b), codes))
        # securities differ between the markets: a stable sort on the key keeps each security's own order
        return pl.concat([a, b]).sort(key, maintain_order=True)

    return Market(
        trades=joined("trades", ["security"]),
        quotes=joined("quotes", ["security"]),
        securities=joined("securities", ["security"]),
        characteristics=joined("characteristics", ["security", "date"]),
        returns=joined("returns", ["security", "month"]),
        truth=joined("truth", ["security", "month"]),
        fx=_exchange_rates(spec, np.union1d(first_cal.days, cal.days), profile["currency"]),
        spec=spec,
    )


def _exchange_rates(spec: SimulationSpec, days: np.ndarray, currency: str) -> pl.DataFrame:
    """Invented daily rates (first market's currency per unit of ``currency``): a random walk in logs.

    log rate_d = log ``fx_start`` + sum of N(0, ``fx_vol``^2) steps, one per
    day of ``days`` (every open day of either market), from a stream of its
    own seeded by ``[seed, 4217]``; rounded to 6 decimals, as rates are quoted.
    """
    steps = np.random.default_rng([spec.seed, 4217]).standard_normal(len(days)) * spec.fx_vol
    steps[0] = 0.0
    rate = np.round(spec.fx_start * np.exp(np.cumsum(steps)), 6)
    return pl.DataFrame({"date": days, "currency": currency, "rate": rate}).with_columns(pl.col("date").cast(pl.Date))


def simulate_security_months(
    half_spread: np.ndarray,
    daily_vol: np.ndarray,
    trades_per_day: np.ndarray,
    n_days: int = 21,
    seed: int = 0,
    tick: float | None = None,
    tz: str = "America/New_York",
    session: tuple[str, str] = ("09:10", "15:40"),
    *,
    start: str = "2021-01",
    price: float = 50.0,
    overnight_share: float = 0.0,
) -> Market:
    """Independent security-months of the Roll model on a grid of parameters.

    Element k of the (broadcast) arrays is one security, ``sim-S000001`` for
    k = 0, ..., traded for ``n_days`` business days from the first day of
    ``start`` (21 days = January 2021 exactly) with half-spread
    ``half_spread[k]`` (proportion), daily efficient volatility
    ``daily_vol[k]`` and ``trades_per_day[k]`` mean trades per day. No market
    factor (securities are independent), no drift (``expected_ret`` = 0), no
    bad rows; initial price ``price``. Same engine as ``simulate_market``;
    ``truth`` has one row per security and calendar month touched.
    """
    half, vol, lam = np.broadcast_arrays(
        np.atleast_1d(np.asarray(half_spread, dtype=np.float64)),
        np.atleast_1d(np.asarray(daily_vol, dtype=np.float64)),
        np.atleast_1d(np.asarray(trades_per_day, dtype=np.float64)),
    )
    if half.ndim != 1:
        raise ConfigError("simulate_security_months: half_spread, daily_vol and trades_per_day must be 1-D arrays")
    for name, values, ok in (
        ("half_spread", half, (half >= 0) & (half < 1)),
        ("daily_vol", vol, vol >= 0),
        ("trades_per_day", lam, lam >= 0),
    ):
        if not np.all(ok):
            raise ConfigError(f"simulate_security_months: '{name}' has values out of range, e.g. {values[~ok][0]!r}")
    if not isinstance(n_days, (int, np.integer)) or n_days < 1:
        raise ConfigError(f"simulate_security_months: 'n_days' = {n_days!r}: expected a positive integer")
    if tick is not None and not tick > 0:
        raise ConfigError(f"simulate_security_months: 'tick' = {tick!r}: expected a positive price increment or None")
    if not 0 <= overnight_share <= 1:
        raise ConfigError(
            f"simulate_security_months: 'overnight_share' = {overnight_share!r}: expected a share in [0, 1]"
        )
    first = _month_start(start, "start").astype("datetime64[D]")
    days = np.busday_offset(first, np.arange(n_days), roll="forward")
    cal = _calendar(days)
    k, n_months = len(half), len(cal.months)
    width = max(6, len(str(k)))
    ids = np.array([security_code(f"S{j + 1:0{width}d}") for j in range(k)])
    pop = _Population(
        security=ids,
        firm_name=np.array([f"Simulated security {j + 1:0{width}d}" for j in range(k)]),
        shares_out=np.full(k, 1.0e7),
        price0=np.full(k, float(price)),
        beta=np.zeros(k),
        daily_vol=vol.copy(),
        trades_per_day=lam.copy(),
        half_spread=np.repeat(half[:, None], n_months, axis=1),
        expected_ret=np.zeros((k, n_months)),
        book_to_market=None,
    )
    how = _Trading(
        market_vol=0.0,
        overnight_share=float(overnight_share),
        tick=tick,
        bad_row_share=0.0,
        tz=tz,
        sessions=(tuple(session),),
        lot=100.0,
        trade_lots=3.0,
        quote_lots=5.0,
    )
    return _run(np.random.default_rng(seed), pop, cal, how)


def market_factor_returns(market: Market) -> pl.DataFrame:
    """A factor file of the invented market: ``month``, ``mkt``.

    ``mkt`` is the value-weighted average of the securities' monthly returns,
    weighted by market capitalisation at the end of the previous month, dated
    by the month in which it is earned (the way factor returns are usually
    published). It lets the demo estimate factor alphas. With a second
    market (``market.fx``), every return and weight is first converted into
    the first market's currency at the month-end rates: a return becomes
    (1 + r) x rate_t / rate_t-1 - 1.
    """
    caps = market.characteristics.select(
        "security",
        pl.col("date").dt.truncate("1mo").dt.offset_by("1mo").alias("month"),
        pl.col("market_cap").alias("_weight"),
    )
    returns = market.returns
    if market.fx is not None:
        # the month-end rate of each security's currency (1 for the first market's), this month and the last
        rates = (
            market.characteristics.select("security", "date")
            .join(market.securities.select("security", "market"), on="security", how="left")
            .join(market.fx.select("date", "rate"), on="date", how="left")
            .select(
                "security",
                pl.col("date").dt.truncate("1mo").alias("month"),
                pl.when(pl.col("market") == market.spec.market_codes[0]).then(1.0).otherwise(pl.col("rate"))
                .alias("_rate"),
            )
            .sort("security", "month")
            .with_columns(pl.col("_rate").shift(1).over("security").alias("_previous_rate"))
        )
        returns = returns.join(rates, on=["security", "month"], how="left").select(
            "security", "month", ((1.0 + pl.col("ret")) * pl.col("_rate") / pl.col("_previous_rate") - 1.0).alias("ret")
        )
        caps = caps.join(
            rates.select("security", pl.col("month").dt.offset_by("1mo"), "_rate"), on=["security", "month"]
        ).select("security", "month", pl.col("_weight") * pl.col("_rate"))
    return (
        returns.join(caps, on=["security", "month"], how="inner")
        .drop_nulls(["ret", "_weight"])
        .group_by("month")
        .agg(((pl.col("ret") * pl.col("_weight")).sum() / pl.col("_weight").sum()).alias("mkt"))
        .sort("month")
    )


# A daily file as a data vendor might deliver it: its own column names, CSV,
# gzip-compressed. The mapping to our names is in config/daily_example.yaml.
DAILY_EXAMPLE_COLUMNS = {
    "security": "ticker", "date": "trade_day", "open": "first_px", "high": "top_px", "low": "bottom_px",
    "close": "last_px", "volume": "qty", "dollar_volume": "turnover_ccy", "n_trades": "deals", "ret": "day_return",
}


def daily_example(market: Market, timezone: str | None = None) -> pl.DataFrame:
    """The market's daily bars in a vendor-style layout, for the daily entry point.

    Built from the good trades by :func:`liqpanel.bars.daily_bars`, then
    renamed to the invented vendor names in ``DAILY_EXAMPLE_COLUMNS`` and
    with ``shares_out`` renamed ``shares_outstanding``. With a second market
    each market's days are its own local days (its profile's time zone) and
    the file gains ``listing`` (the security's market code).
    """
    from liqpanel.bars import daily_bars

    tz = timezone or (market.spec.tz if market.spec is not None else "America/New_York")
    trades = market.trades.lazy().filter(pl.col("true_sign") != 0)
    extra, names = [], {**DAILY_EXAMPLE_COLUMNS, "shares_out": "shares_outstanding"}
    if market.fx is None:
        daily = daily_bars(trades, timezone=tz)
    else:
        zones = dict(zip(market.spec.market_codes, (tz, second_market_profile(market.spec)["timezone"])))
        daily = pl.concat([
            daily_bars(trades.join(market.securities.lazy().filter(pl.col("market") == code).select("security"),
                                   on="security", how="semi"), timezone=zone)
            for code, zone in zones.items()
        ])
        extra, names = ["market"], {**names, "market": "listing"}
    daily = daily.join(market.securities.lazy().select("security", "shares_out", *extra), on="security", how="left")
    return (
        daily.select(*DAILY_EXAMPLE_COLUMNS, "shares_out", *extra)
        .rename(names)
        .sort("ticker", "trade_day")
        .collect()
    )


def write_market(market: Market, out_dir: str | Path) -> dict[str, Path]:
    """Write ``<table>.parquet`` for every table of ``market`` into ``out_dir``.

    Bytes are deterministic for the same tables: pyarrow writer, zstd level
    9, one row group per million rows, no timestamps in the metadata. To keep
    the demo small, timestamps use delta encoding and prices byte-stream-split
    encoding (both standard Parquet encodings). Each file is written to a
    temporary name and moved into place. Returns the paths by table name.
    """
    import pyarrow.parquet as pq

    from liqpanel.io import atomic_path

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    paths = {}
    tables = {**market.tables(), "factors": market_factor_returns(market)}
    for name, frame in tables.items():
        encoding = {c: "BYTE_STREAM_SPLIT" for c in ("price", "bid", "ask") if c in frame.columns}
        if "ts" in frame.columns:
            encoding["ts"] = "DELTA_BINARY_PACKED"
        path = out / f"{name}.parquet"
        with atomic_path(path) as tmp:
            pq.write_table(
                frame.to_arrow(),
                tmp,
                compression="zstd",
                compression_level=9,
                row_group_size=1 << 20,
                use_dictionary=[c for c in frame.columns if c not in encoding],
                column_encoding=encoding or None,
                write_statistics=True,
            )
        paths[name] = path
    path = out / "daily_example.csv.gz"
    with atomic_path(path) as tmp:
        # mtime=0 keeps the gzip header, and so the file, byte-identical
        with open(tmp, "wb") as raw, gzip.GzipFile(filename="", mode="wb", fileobj=raw, mtime=0) as gz:
            gz.write(daily_example(market).write_csv(float_precision=10).encode())
    paths["daily_example"] = path
    return paths
