"""The Gibbs spread measure over a daily table (Hasbrouck 2004, 2009; the sampler is ``liqpanel.measures.gibbs``).

The security-months are padded into (days x security-months) arrays, sampled
together in batches of bounded memory, and summarised per month: the
posterior means with their interval and the diagnostics.
"""

from __future__ import annotations

import numpy as np
import polars as pl

from liqpanel.core.contracts import require_columns
from liqpanel.core.errors import ConfigError
from liqpanel.measures.gibbs import (
    KEY, MIN_RETURNS, _check_sweeps, _prior, sample_roll_model,
)
from liqpanel.measures.market import add_market_return

BATCH_CELLS = 5_000_000  # kept draws x security-months per batch (40 MB per stored array)


def _padded(frame: pl.DataFrame, column: str, months: int, days: int) -> np.ndarray:
    out = np.zeros((days, months))
    out[frame["_pos"].to_numpy(), frame["_g"].to_numpy()] = frame[column].fill_null(0.0).to_numpy()
    return out


def gibbs_spread(
    daily: pl.LazyFrame,
    *,
    sweeps: int = 1000,
    burn: int = 200,
    seed: int = 1984,
    prior: dict[str, float] | None = None,
    use_market: bool = False,
    interval: float = 0.90,
) -> pl.LazyFrame:
    """Hasbrouck (2004, 2009) Gibbs estimate of the Roll-model spread, per security-month.

    Model: dp_t = c (q_t - q_{t-1}) + beta r_m,t + u_t with dp_t = ln(1 + ret_t)
    the daily log price change (from ``ret``, so adjusted for splits and
    dividends), q_t = +-1, u_t ~ N(0, sigma_u^2) i.i.d., c > 0. The month's
    returns include its first day's change from the previous trading day's
    close (a latent sign q_0 stands for that close); days without trades have
    no row, so a return may span several calendar days. ``use_market=True``
    adds the loading beta on r_m,t = ln(1 + ``mkt_ret``) (the equal-weighted
    market return of the input, from ``add_market_return``, when the table has
    none).

    Priors (``prior``, any subset of keys): c ~ N(c_mean, c_sd^2) truncated to
    c > 0 (default 0 and 0.05: a half-normal prior, the kind Hasbrouck 2009
    uses for daily data, from memory; the scale is a convention of this
    project); beta ~ N(loading_mean, loading_sd^2) (default 1, 1); sigma_u^2 ~
    inverse gamma(alpha0, beta0) (default 1e-12 each, the usual vague choice,
    from memory); q_t = +-1 with
    equal probability, excluding the configurations with every dq_t = 0
    (the guard against stuck chains, see ``sample_roll_model``).

    ``sweeps`` sweeps (default 1000) of which the first ``burn`` (200) are
    discarded. Outputs, proportional to the price (log price units):
    ``gibbs_spread`` = 2 x the posterior mean of c; ``gibbs_spread_lo`` and
    ``gibbs_spread_hi`` the equal-tailed ``interval`` (default 90%) of 2c;
    ``gibbs_sigma_u`` the posterior mean of sigma_u (daily). ``n_obs`` counts the
    returns used; a month with fewer than 3 gets no value (reason
    "too_few_returns").

    Assumptions: the Roll model holds within the month, the close is a trade
    at the bid or the ask with equal probability independently of the
    efficient-price innovation. On 21-day months the posterior mean of c is
    biased up when the spread is small relative to daily volatility (the data
    hardly identify c and the prior dominates), and somewhat down (about 10%
    in this project's tests) when half-spread and volatility are of the same
    size; on long windows it recovers the truth.

    The sampler works on numpy arrays, so the function collects the columns it
    needs and returns the (small) monthly result as a LazyFrame.

    Reproducible: one ``numpy.random.default_rng(seed)`` stream drives every
    draw, months are processed in (security, month) order, so the same input
    and seed give the same values. A month's draws depend on the other months
    estimated with it only through the random stream (Monte Carlo noise).

    Sources: Hasbrouck, J. (2004), "Liquidity in the futures pits: inferring
    market dynamics from incomplete data", Journal of Financial and
    Quantitative Analysis 39(2), 305-326; Hasbrouck, J. (2009), "Trading costs
    and returns for U.S. equities: estimating effective costs from daily
    data", Journal of Finance 64(3), 1445-1477; Roll, R. (1984), Journal of
    Finance 39(4), 1127-1139.
    """
    if not 0.0 < interval < 1.0:
        raise ConfigError(f"measure 'gibbs_spread': option `interval` must lie strictly between 0 and 1, got {interval}")
    columns = ["security", "month", "date", "ret"] + (["mkt_ret"] if use_market else [])
    if use_market and "mkt_ret" not in daily.collect_schema().names():
        daily = add_market_return(daily)
    require_columns(daily, columns, table="daily")
    p = _prior(prior)
    _check_sweeps(sweeps, burn)

    ret = pl.col("ret")
    valid = ret.is_not_null() & ret.is_finite() & (ret > -1.0)
    if use_market:
        valid = valid & pl.col("mkt_ret").is_not_null() & pl.col("mkt_ret").is_finite() & (pl.col("mkt_ret") > -1.0)
    frame = (
        daily.select(columns)
        .sort("security", "month", "date")
        .with_columns(
            pl.when(valid).then(ret).otherwise(None).alias("_ret"),
            pl.int_range(pl.len()).over(KEY).alias("_pos"),
        )
        .collect(engine="in-memory")  # deterministic: the same input gives the same arrays
    )
    months = (
        frame.group_by(KEY, maintain_order=True)
        .agg(pl.col("_ret").count().cast(pl.Int64).alias("n_obs"), pl.len().alias("_days"))
        .with_columns((pl.col("n_obs") >= MIN_RETURNS).alias("_sampled"))
    )
    sampled = months.filter(pl.col("_sampled")).with_row_index("_g")
    rows = frame.join(sampled.select(*KEY, "_g"), on=KEY, how="inner")
    n_months = sampled.height
    results = {name: np.full(n_months, np.nan) for name in ("gibbs_spread", "gibbs_spread_lo", "gibbs_spread_hi", "gibbs_sigma_u")}
    if n_months:
        days = int(sampled["_days"].max())
        dp = np.log1p(_padded(rows, "_ret", n_months, days))  # daily log price changes, zero where missing
        ok = np.zeros((days, n_months), dtype=bool)
        ok[rows["_pos"].to_numpy(), rows["_g"].to_numpy()] = rows["_ret"].is_not_null().to_numpy()
        rm = np.log1p(_padded(rows.with_columns(pl.col("mkt_ret").cast(pl.Float64)), "mkt_ret", n_months, days)) if use_market else None
        rng = np.random.default_rng(seed)
        batch = max(1, BATCH_CELLS // (sweeps - burn))
        tail = (1.0 - interval) / 2.0
        for start in range(0, n_months, batch):
            cols = slice(start, min(start + batch, n_months))
            draws = sample_roll_model(
                dp[:, cols], ok[:, cols], rm[:, cols] if use_market else None,
                sweeps=sweeps, burn=burn, rng=rng, prior=p,
            )
            spread = 2.0 * draws.half_spread
            results["gibbs_spread"][cols] = spread.mean(axis=0)
            lo, hi = np.quantile(spread, [tail, 1.0 - tail], axis=0)
            results["gibbs_spread_lo"][cols] = lo
            results["gibbs_spread_hi"][cols] = hi
            results["gibbs_sigma_u"][cols] = draws.sigma_u.mean(axis=0)
    estimates = sampled.select(*KEY, *[pl.Series(name, values) for name, values in results.items()])
    out = (
        months.join(estimates, on=KEY, how="left")
        .with_columns(
            pl.when(pl.col("_sampled")).then(None).otherwise(pl.lit("too_few_returns")).cast(pl.String).alias("reason")
        )
        .select(*KEY, *results, "n_obs", "reason")
        .sort(KEY)
    )
    return out.lazy()


__all__ = ["gibbs_spread"]
