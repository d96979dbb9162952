"""A whole invented market (one or two exchanges, FX between them): ``simulate_market``."""

from __future__ import annotations

import dataclasses

import numpy as np
import polars as pl

from liqpanel.core.errors import ConfigError
from liqpanel.simulate.calendar import _Calendar, _business_days, _calendar, _month_start
from liqpanel.simulate.engine import _Trading, _run
from liqpanel.simulate.population import _population
from liqpanel.simulate.spec import Market, SimulationSpec


def simulate_market(spec: SimulationSpec | None = None, **overrides) -> Market:
    """Simulate the invented market described in the docstring of ``liqpanel.simulate``.

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
