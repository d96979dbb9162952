"""Spreads from daily high and low prices: Corwin & Schultz (2012), Abdi & Ranaldo (2017).

Both estimators combine two consecutive trading days. Convention of this
project: the pair is the security's trading day t and its next trading day
t+1 within the same month; the pair that would straddle a month boundary is
not used, so each month is self-contained (a month of n trading days gives
n - 1 pairs). Days without trades have no row, so a pair may span a gap of
calendar days.

Units: proportional full spreads (0.01 = 1% of the price).
"""

from __future__ import annotations

import math

import polars as pl

from liqpanel.contracts import require_columns
from liqpanel.errors import ConfigError
from liqpanel.measures.neighbours import in_security_date_order, next_in_month

KEY = ["security", "month"]
NEGATIVE_CHOICES = ("zero", "keep")
_K = 3.0 - 2.0 * math.sqrt(2.0)  # the constant 3 - 2 sqrt(2) of Corwin & Schultz (2012)


def _next_in_month(col: str) -> pl.Expr:
    return next_in_month(pl.col(col))


def corwin_schultz_pieces(daily: pl.LazyFrame) -> pl.LazyFrame:
    """The two-day Corwin-Schultz spread S_t for each day t with a next day in the month.

    Adds the columns ``cs_beta``, ``cs_gamma``, ``cs_alpha`` and ``cs_two_day``
    (null on a month's last day). See ``corwin_schultz_spread`` for the formula.
    """
    require_columns(daily, ["security", "month", "date", "high", "low", "close"], table="daily")
    daily = in_security_date_order(daily)  # the result must not depend on the row order
    high0, low0, close0 = pl.col("high"), pl.col("low"), pl.col("close")
    high1, low1 = _next_in_month("high"), _next_in_month("low")
    # Overnight adjustment (Corwin & Schultz 2012, their treatment of overnight returns), in price levels:
    # a next-day low above today's close, or a next-day high below it, is a
    # price move outside the trading hours; shift day t+1's range by the gap.
    gap = (
        pl.when(low1 > close0).then(low1 - close0)
        .when(high1 < close0).then(high1 - close0)
        .otherwise(0.0)
    )
    high1 = high1 - gap
    low1 = low1 - gap
    beta = (high0 / low0).log() ** 2 + (high1 / low1).log() ** 2
    gamma = (pl.max_horizontal(high0, high1) / pl.min_horizontal(low0, low1)).log() ** 2
    gamma = pl.when(high1.is_null() | low1.is_null()).then(None).otherwise(gamma)
    alpha = ((2.0 * pl.col("cs_beta")).sqrt() - pl.col("cs_beta").sqrt()) / _K - (pl.col("cs_gamma") / _K).sqrt()
    return daily.with_columns(cs_beta=beta, cs_gamma=gamma).with_columns(cs_alpha=alpha).with_columns(
        cs_two_day=2.0 * (pl.col("cs_alpha").exp() - 1.0) / (1.0 + pl.col("cs_alpha").exp())
    )


def corwin_schultz_spread(daily: pl.LazyFrame, *, negative: str = "zero") -> pl.LazyFrame:
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
    estimates.

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
    if negative not in NEGATIVE_CHOICES:
        raise ConfigError(f"measure 'cs_spread': option `negative` must be one of {NEGATIVE_CHOICES}, got {negative!r}")
    pieces = corwin_schultz_pieces(daily)
    two_day = pl.col("cs_two_day")
    if negative == "zero":
        two_day = two_day.clip(lower_bound=0.0)
    return (
        pieces.group_by(KEY, maintain_order=True)
        .agg(two_day.mean().alias("cs_spread"), two_day.count().cast(pl.Int64).alias("n_obs"))
        .with_columns(_reason_no_pairs())
        .select(*KEY, "cs_spread", "n_obs", "reason")
        .sort(KEY)
    )


def _reason_no_pairs() -> pl.Expr:
    return (
        pl.when(pl.col("n_obs") == 0).then(pl.lit("no_consecutive_days")).otherwise(None).cast(pl.String).alias("reason")
    )


def abdi_ranaldo_pieces(daily: pl.LazyFrame) -> pl.LazyFrame:
    """The two-day Abdi-Ranaldo piece s_t^2 = 4 (c_t - eta_t)(c_t - eta_{t+1}) per day.

    Adds ``ar_piece`` (null on a month's last day); log prices, eta = (h + l) / 2.
    """
    require_columns(daily, ["security", "month", "date", "high", "low", "close"], table="daily")
    daily = in_security_date_order(daily)  # the result must not depend on the row order
    eta = ((pl.col("high").log() + pl.col("low").log()) / 2.0)
    close = pl.col("close").log()
    eta_next = next_in_month(eta)
    return daily.with_columns(ar_piece=4.0 * (close - eta) * (close - eta_next))


def abdi_ranaldo_two_day_spread(daily: pl.LazyFrame) -> pl.LazyFrame:
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

    Output ``ar_spread_2day``; ``n_obs`` pairs used; ``reason``
    "no_consecutive_days" when the month has no pair.
    """
    piece = pl.col("ar_piece")
    return _monthly_from_pieces(daily, piece.clip(lower_bound=0.0).sqrt().mean(), "ar_spread_2day")


def abdi_ranaldo_monthly_spread(daily: pl.LazyFrame) -> pl.LazyFrame:
    """Abdi & Ranaldo (2017) close-high-low spread, monthly variant.

    The monthly estimate is sqrt(max(mean_t s_t^2, 0)) with the two-day pieces
    s_t^2 = 4 (c_t - eta_t)(c_t - eta_{t+1}) of ``abdi_ranaldo_two_day_spread``
    (Abdi & Ranaldo 2017, their monthly estimator): the pieces are
    averaged before the square root, so a month with a negative mean gets 0.
    Close to unbiased when the spread is not small relative to volatility.

    Source: Abdi, F. & Ranaldo, A. (2017), Review of Financial Studies 30(12),
    4437-4480. Units and assumptions as for the two-day variant.

    Output ``ar_spread_monthly``; ``n_obs`` pairs used; ``reason``
    "no_consecutive_days" when the month has no pair.
    """
    piece = pl.col("ar_piece")
    return _monthly_from_pieces(daily, piece.mean().clip(lower_bound=0.0).sqrt(), "ar_spread_monthly")


def _monthly_from_pieces(daily: pl.LazyFrame, estimate: pl.Expr, name: str) -> pl.LazyFrame:
    """Aggregate the Abdi-Ranaldo two-day pieces of each month with ``estimate``."""
    return (
        abdi_ranaldo_pieces(daily)
        .group_by(KEY, maintain_order=True)
        .agg(estimate.alias(name), pl.col("ar_piece").count().cast(pl.Int64).alias("n_obs"))
        .with_columns(_reason_no_pairs())
        .select(*KEY, name, "n_obs", "reason")
        .sort(KEY)
    )


__all__ = [
    "abdi_ranaldo_monthly_spread",
    "abdi_ranaldo_pieces",
    "abdi_ranaldo_two_day_spread",
    "corwin_schultz_pieces",
    "corwin_schultz_spread",
]
