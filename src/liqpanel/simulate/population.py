"""The securities of a market: sizes, betas, volatilities, intensities and the planted liquidity factor."""

from __future__ import annotations

import numpy as np
import polars as pl

from liqpanel.simulate.calendar import _Calendar
from liqpanel.simulate.engine import _Population
from liqpanel.simulate.names import _firm_names, _tickers
from liqpanel.simulate.spec import SimulationSpec


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
