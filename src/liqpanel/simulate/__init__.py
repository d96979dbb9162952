"""An invented market with known truth: the Roll (1984) model traded intraday.

Source of the model: Roll, R. (1984), "A simple implicit measure of the
effective bid-ask spread in an efficient market", Journal of Finance 39,
1127-1139 (citation from memory).

The simulator feeds the demo data, the recovery test of every estimator and
simulation studies. Everything it writes follows the table contracts of
``liqpanel.core.contracts``; the columns it adds (``true_sign`` in the trades) are
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

from liqpanel.simulate.market import second_market_profile, simulate_market
from liqpanel.simulate.names import SECURITY_PREFIX, security_code
from liqpanel.simulate.security_months import simulate_security_months
from liqpanel.simulate.spec import Market, SimulationSpec, TABLES
from liqpanel.simulate.tables import DAILY_EXAMPLE_COLUMNS, daily_example, market_factor_returns, write_market

__all__ = [
    "DAILY_EXAMPLE_COLUMNS",
    "Market",
    "SECURITY_PREFIX",
    "SimulationSpec",
    "TABLES",
    "daily_example",
    "market_factor_returns",
    "second_market_profile",
    "security_code",
    "simulate_market",
    "simulate_security_months",
    "write_market",
]
