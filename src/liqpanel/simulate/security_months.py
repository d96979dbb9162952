"""Independent security-months with given spread, volatility and intensity, for recovery tests and the study."""

from __future__ import annotations

import numpy as np

from liqpanel.core.errors import ConfigError
from liqpanel.simulate.calendar import _calendar, _month_start
from liqpanel.simulate.engine import _Population, _Trading, _run
from liqpanel.simulate.names import security_code
from liqpanel.simulate.spec import Market


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
