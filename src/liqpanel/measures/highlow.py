"""Spreads from daily high and low prices: Corwin & Schultz (2012), Abdi & Ranaldo (2017).

Both estimators combine two consecutive trading days. Convention of this
project: the pair is the security's trading day t and its next trading day
t+1 within the same month; the pair that would straddle a month boundary is
not used, so each month is self-contained (a month of n trading days gives
n - 1 pairs). Days without trades have no row. With the market's trading
calendar (a profile with ``calendar`` or ``holidays``), an open day on which
the security did not trade breaks the pair (the rows either side are not
consecutive trading days), while a closed day between them does not (a pair
across a holiday or a weekend is a pair). Without a calendar a pair may span
any gap of calendar days (the fallback).

Flat days (high = low, e.g. one trade or a price held at its daily limit)
carry no range. ``flat_days="use"`` (default, what the papers do) keeps
them; ``"drop"`` leaves out every pair with a flat day. Corwin & Schultz's
own remedy for such days is not implemented (from memory, their published
code adjusts some zero-range days; it is not quoted here).

Units: proportional full spreads (0.01 = 1% of the price).
"""

from __future__ import annotations

import math

import polars as pl

from liqpanel.core.contracts import require_columns
from liqpanel.core.errors import ConfigError
from liqpanel.measures.neighbours import next_in_month
from liqpanel.measures.plan import Plan, log_of, missing_reason, prepare, run_plan, with_steps

NEGATIVE_CHOICES = ("zero", "keep")
FLAT_DAY_CHOICES = ("use", "drop")
_K = 3.0 - 2.0 * math.sqrt(2.0)  # the constant 3 - 2 sqrt(2) of Corwin & Schultz (2012)


def _next_in_month(col: str) -> pl.Expr:
    return next_in_month(pl.col(col))


def flat_day() -> pl.Expr:
    """A day whose high equals its low: no range (``flat_days``)."""
    return pl.col("high") == pl.col("low")


def check_flat_days(flat_days: str, measure: str) -> bool:
    """Whether pairs with a flat day are dropped; a ConfigError for an unknown choice."""
    if flat_days not in FLAT_DAY_CHOICES:
        raise ConfigError(f"measure '{measure}': option `flat_days` must be one of {FLAT_DAY_CHOICES}, got {flat_days!r}")
    return flat_days == "drop"


def _without_flat_pairs(piece: pl.Expr) -> pl.Expr:
    """``piece`` of the pair (t, t+1), null when either day is flat."""
    flat = flat_day() | next_in_month(flat_day()).fill_null(False)
    return pl.when(~flat).then(piece)


def _cs_steps() -> tuple[dict[str, pl.Expr], ...]:
    """Per-day columns of the two-day Corwin-Schultz spread S_t (``_cs_two_day``, null on a month's last day)."""
    high0, low0, close0 = pl.col("high"), pl.col("low"), pl.col("close")
    high1, low1 = pl.col("_cs_high_next"), pl.col("_cs_low_next")
    # Overnight adjustment (Corwin & Schultz 2012, their treatment of overnight returns), in price levels:
    # a next-day low above today's close, or a next-day high below it, is a
    # price move outside the trading hours; shift day t+1's range by the gap.
    gap = (
        pl.when(low1 > close0).then(low1 - close0)
        .when(high1 < close0).then(high1 - close0)
        .otherwise(0.0)
    )
    high1a, low1a = pl.col("_cs_high_adj"), pl.col("_cs_low_adj")
    beta, gamma, alpha = pl.col("_cs_beta"), pl.col("_cs_gamma"), pl.col("_cs_alpha")
    return (
        {"_cs_high_next": _next_in_month("high"), "_cs_low_next": _next_in_month("low")},
        {"_cs_gap": gap},
        {"_cs_high_adj": high1 - pl.col("_cs_gap"), "_cs_low_adj": low1 - pl.col("_cs_gap")},
        {
            "_cs_beta": (log_of("high") - log_of("low")) ** 2 + (high1a / low1a).log() ** 2,
            "_cs_gamma": (pl.max_horizontal(high0, high1a) / pl.min_horizontal(low0, low1a)).log() ** 2,
        },
        {"_cs_alpha": ((2.0 * beta).sqrt() - beta.sqrt()) / _K - (gamma / _K).sqrt()},
        {"_cs_two_day": 2.0 * (alpha.exp() - 1.0) / (1.0 + alpha.exp())},
    )


def corwin_schultz_pieces(daily: pl.LazyFrame) -> pl.LazyFrame:
    """The daily table with ``cs_two_day``, the two-day Corwin-Schultz spread S_t (null on a month's last day).

    See ``corwin_schultz_spread`` for the formula.
    """
    require_columns(daily, ["security", "month", "date", "high", "low", "close"], table="daily")
    return with_steps(prepare(daily).lazy(), _cs_steps()).with_columns(pl.col("_cs_two_day").alias("cs_two_day"))


def corwin_schultz_plan(*, negative: str = "zero", flat_days: str = "use") -> Plan:
    """The plan of ``corwin_schultz_spread`` (see there)."""
    if negative not in NEGATIVE_CHOICES:
        raise ConfigError(f"measure 'cs_spread': option `negative` must be one of {NEGATIVE_CHOICES}, got {negative!r}")
    two_day = pl.col("_cs_two_day")
    if check_flat_days(flat_days, "cs_spread"):
        two_day = _without_flat_pairs(two_day)
    if negative == "zero":
        two_day = two_day.clip(lower_bound=0.0)
    return Plan(
        steps=_cs_steps(),
        sums={"sum": two_day, "n": two_day.is_not_null()},
        monthly=(
            pl.when(pl.col("n") > 0).then(pl.col("sum") / pl.col("n")).alias("cs_spread"),
            pl.col("n").cast(pl.Int64).alias("n_obs"),
            missing_reason(pl.col("n") == 0, "no_consecutive_days"),
        ),
    )


def corwin_schultz_spread(daily: pl.LazyFrame, *, negative: str = "zero", flat_days: str = "use") -> pl.LazyFrame:
    """Corwin & Schultz (2012) high-low spread estimator, monthly.

    For consecutive trading days t, t+1 of the month (H, L daily high and low):

        beta  = [ln(H_t / L_t)]^2 + [ln(H_{t+1} / L_{t+1})]^2
        gamma = [ln(max(H_t, H_{t+1}) / min(L_t, L_{t+1}))]^2
        alpha = (sqrt(2 beta) - sqrt(beta)) / (3 - 2 sqrt 2) - sqrt(gamma / (3 - 2 sqrt 2))
        S_t   = 2 (e^alpha - 1) / (1 + e^alpha)

    (Corwin & Schultz 2012, the spread equation and the closed form for alpha;
    equation numbers are not quoted here). Overnight adjustment (their
    treatment of overnight returns): if L_{t+1} > C_t, H_{t+1} and L_{t+1} are lowered by
    L_{t+1} - C_t; if H_{t+1} < C_t they are raised by C_t - H_{t+1}.
    ``negative="zero"`` (default, the paper's main choice) sets negative
    two-day estimates to zero before averaging; ``"keep"`` averages them as
    they are. Flooring biases the mean up when the spread is small relative
    to daily volatility. The monthly estimate is the mean of the two-day
    estimates. Pairs: consecutive trading days of the month; with the
    market's calendar an open day without a trade breaks a pair and a
    holiday does not (module docstring). ``flat_days``: "use" (default)
    or "drop" pairs with a day whose high equals its low.

    Assumptions: the daily high is a buyer-initiated trade and the low a
    seller-initiated one; the variance of the efficient price is proportional
    to the time interval, so two days' range has twice one day's variance.
    With no volatility and both a buy and a sell every day, S_t equals
    (ask - bid) / midpoint exactly.

    Source: Corwin, S. A. & Schultz, P. (2012), "A simple way to estimate
    bid-ask spreads from daily high and low prices", Journal of Finance
    67(2), 719-760.

    Output ``cs_spread`` (proportional full spread); ``n_obs`` the number of
    two-day pairs; ``reason`` "no_consecutive_days" when the month has no pair.
    """
    require_columns(daily, ["security", "month", "date", "high", "low", "close"], table="daily")
    return run_plan(daily, corwin_schultz_plan(negative=negative, flat_days=flat_days))


def _ar_piece() -> pl.Expr:
    """s_t^2 = 4 (c_t - eta_t)(c_t - eta_{t+1}) in log prices, eta = (h + l) / 2; null on a month's last day."""
    eta = (log_of("high") + log_of("low")) / 2.0
    close = log_of("close")
    return 4.0 * (close - eta) * (close - next_in_month(eta))


def _ar_plan(estimate: pl.Expr, name: str, flat_days: str) -> Plan:
    piece = _ar_piece()
    if check_flat_days(flat_days, name):
        piece = _without_flat_pairs(piece)
    n = pl.col("n")
    return Plan(
        sums={"sum": piece, "sum_root": piece.clip(lower_bound=0.0).sqrt(), "n": piece.is_not_null()},
        monthly=(
            pl.when(n > 0).then(estimate).alias(name),
            n.cast(pl.Int64).alias("n_obs"),
            missing_reason(n == 0, "no_consecutive_days"),
        ),
    )


def abdi_ranaldo_two_day_plan(*, flat_days: str = "use") -> Plan:
    """The plan of ``abdi_ranaldo_two_day_spread``: the mean of the floored square roots."""
    return _ar_plan(pl.col("sum_root") / pl.col("n"), "ar_spread_2day", flat_days)


def abdi_ranaldo_monthly_plan(*, flat_days: str = "use") -> Plan:
    """The plan of ``abdi_ranaldo_monthly_spread``: the floored square root of the mean piece."""
    return _ar_plan((pl.col("sum") / pl.col("n")).clip(lower_bound=0.0).sqrt(), "ar_spread_monthly", flat_days)


def abdi_ranaldo_two_day_spread(daily: pl.LazyFrame, *, flat_days: str = "use") -> pl.LazyFrame:
    """Abdi & Ranaldo (2017) close-high-low spread, two-day corrected variant.

    With log prices c (close), h, l and the mid-range eta_t = (h_t + l_t)/2,
    each pair of consecutive trading days in the month gives

        s_t^2 = 4 (c_t - eta_t)(c_t - eta_{t+1})        (Abdi & Ranaldo 2017)

    and the monthly estimate is mean_t sqrt(max(s_t^2, 0)): negative two-day
    pieces count as zero. Flooring and the square root of single pieces bias
    the average up when the spread is small relative to daily volatility.

    Assumptions: the efficient log price is a Brownian motion observed over
    the day; the close is a trade at the bid or the ask with equal probability;
    the mid-range proxies the efficient price. Units: proportional spread in
    log terms (ln(ask/bid), equal to the proportional spread to first order).

    Source: Abdi, F. & Ranaldo, A. (2017), "A simple estimation of bid-ask
    spreads from daily close, high, and low prices", Review of Financial
    Studies 30(12), 4437-4480.

    Pairs: consecutive trading days of the month; with the market's
    calendar an open day without a trade breaks a pair and a holiday does
    not (module docstring). ``flat_days``: "use" (default, the paper's
    estimator) or "drop" pairs with a day whose high equals its low.

    Output ``ar_spread_2day``; ``n_obs`` pairs used; ``reason``
    "no_consecutive_days" when the month has no pair.
    """
    require_columns(daily, ["security", "month", "date", "high", "low", "close"], table="daily")
    return run_plan(daily, abdi_ranaldo_two_day_plan(flat_days=flat_days))


def abdi_ranaldo_monthly_spread(daily: pl.LazyFrame, *, flat_days: str = "use") -> pl.LazyFrame:
    """Abdi & Ranaldo (2017) close-high-low spread, monthly variant.

    The monthly estimate is sqrt(max(mean_t s_t^2, 0)) with the two-day pieces
    s_t^2 = 4 (c_t - eta_t)(c_t - eta_{t+1}) of ``abdi_ranaldo_two_day_spread``
    (Abdi & Ranaldo 2017, their monthly estimator): the pieces are
    averaged before the square root, so a month with a negative mean gets 0.
    Close to unbiased when the spread is not small relative to volatility.

    Source: Abdi, F. & Ranaldo, A. (2017), Review of Financial Studies 30(12),
    4437-4480. Units, assumptions, pairs and ``flat_days`` as for the
    two-day variant.

    Output ``ar_spread_monthly``; ``n_obs`` pairs used; ``reason``
    "no_consecutive_days" when the month has no pair.
    """
    require_columns(daily, ["security", "month", "date", "high", "low", "close"], table="daily")
    return run_plan(daily, abdi_ranaldo_monthly_plan(flat_days=flat_days))


__all__ = [
    "FLAT_DAY_CHOICES",
    "check_flat_days",
    "flat_day",
    "abdi_ranaldo_monthly_plan",
    "abdi_ranaldo_monthly_spread",
    "abdi_ranaldo_two_day_plan",
    "abdi_ranaldo_two_day_spread",
    "corwin_schultz_pieces",
    "corwin_schultz_plan",
    "corwin_schultz_spread",
]
