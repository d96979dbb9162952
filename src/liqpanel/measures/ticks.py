"""Effective tick: the spread implied by price clustering on the tick grid (Holden 2009; Goyenko, Holden & Trzcinka 2009).

Model (price clustering): on each day the spread is s_j = m_j x tick with
probability gamma_j, j = 1..J (``multiples`` m_1 < ... < m_J of the tick),
and the closing price lies uniformly on the grid of multiples of s_j. A
price is counted in class k, the largest j whose grid it lies on. With
P[k, j] the share of grid-j prices in class k (a constant of the grid, from
one period of the least common multiple), the class frequencies are F_k =
sum_j P[k, j] gamma_j, a lower-triangular system. Its solution U_k =
(F_k - sum_{j<k} P[k, j] U_j) / P[k, k] is Goyenko, Holden & Trzcinka's
unconstrained probability (for halving grids it is their U_1 = 2 F_1, U_j =
2 F_j - F_{j-1}, U_J = F_J - F_{J-1}); the constrained probabilities are
gamma_j = min(max(U_j, 0), 1 - sum_{k<j} gamma_k), and

    effective tick = sum_j gamma_j s_j / mean price.

The general triangular form for any nested or non-nested grid (the decimal
grid 1, 5, 10, 25, 100 ticks is not nested: a quarter is not a dime) is this
project's derivation from the model; it reduces to the published formula on
halving grids (``tests/test_effective_tick.py``).
"""

from __future__ import annotations

import math
from functools import reduce

import numpy as np
import polars as pl

from liqpanel.core.errors import ConfigError
from liqpanel.measures.plan import Plan, run_plan

DECIMAL_MULTIPLES = (1, 5, 10, 25, 100)  # a cent tick: 1c, 5c, 10c, 25c, $1 (Goyenko, Holden & Trzcinka 2009, from memory)
GRID_TOLERANCE = 1e-6  # in ticks: a price within this of the grid is on it (floating-point prices)


def class_shares(multiples: tuple[int, ...]) -> np.ndarray:
    """P[k, j]: the share of the prices on grid j (multiples of m_j ticks) whose class is k.

    The class of a price is the largest j whose grid it lies on. Computed
    over one period of the least common multiple of the multiples (a small
    constant array, not a computation over rows).
    """
    m = np.asarray(multiples, dtype=np.int64)
    period = reduce(math.lcm, m.tolist())
    points = np.arange(period)
    on = points[:, None] % m[None, :] == 0  # point x grid
    cls = on.shape[1] - 1 - np.argmax(on[:, ::-1], axis=1)  # the largest grid each point lies on
    shares = np.zeros((len(m), len(m)))
    for j, mj in enumerate(m):
        on_j = cls[points % mj == 0]
        shares[:, j] = np.bincount(on_j, minlength=len(m)) / on_j.size
    return shares


def _check(multiples, tick_size) -> tuple[int, ...]:
    multiples = tuple(int(x) for x in multiples)
    if len(multiples) < 1 or multiples[0] != 1 or any(b <= a for a, b in zip(multiples, multiples[1:])):
        raise ConfigError(f"measure 'effective_tick': option `multiples` must be increasing whole numbers starting at 1, got {list(multiples)}")
    if tick_size is not None and tick_size != "column" and not (isinstance(tick_size, (int, float)) and tick_size > 0):
        raise ConfigError(f"measure 'effective_tick': option `tick_size` must be a positive number, 'column' or null, got {tick_size!r}")
    return multiples


def effective_tick_plan(*, tick_size: float | str | None = None, multiples=DECIMAL_MULTIPLES, **_) -> Plan:
    """The plan of ``effective_tick``."""
    multiples = _check(multiples, tick_size)
    J = len(multiples)
    shares = class_shares(multiples)
    if tick_size is None:
        tick = pl.lit(None, dtype=pl.Float64)
    elif tick_size == "column":
        tick = pl.col("tick_size").cast(pl.Float64)
    else:
        tick = pl.lit(float(tick_size))
    units = pl.col("_et_units")
    whole = units.round(0)
    on_grid = (units - whole).abs() <= GRID_TOLERANCE
    traded = (pl.col("volume") > 0) & (pl.col("close") > 0) & (tick > 0)
    counted = pl.col("_et_counted")
    whole_ticks = whole.cast(pl.Int64)
    klass = pl.lit(0, dtype=pl.Int32)
    for j, m in enumerate(multiples[1:], start=1):  # the largest grid the price lies on
        klass = pl.when(whole_ticks % m == 0).then(pl.lit(j, dtype=pl.Int32)).otherwise(klass)
    steps = (
        {"_et_units": pl.when(traded).then(pl.col("close") / tick)},
        {"_et_counted": units.is_not_null() & on_grid},
        {"_et_class": pl.when(counted).then(klass)},
    )
    sums = {
        **{f"class{j}": pl.col("_et_class") == j for j in range(J)},
        "n": counted,
        "price": pl.when(counted).then(pl.col("close")),
        "tick": pl.when(counted).then(tick),
        "traded": traded,
    }
    n = pl.col("n")
    frequency = [pl.col(f"class{j}") / n for j in range(J)]
    unconstrained: list[pl.Expr] = []
    for k in range(J):
        explained = sum((shares[k, j] * unconstrained[j] for j in range(k)), pl.lit(0.0))
        unconstrained.append((frequency[k] - explained) / shares[k, k])
    gammas: list[pl.Expr] = []
    for k in range(J):
        left = 1.0 - sum(gammas, pl.lit(0.0))
        gammas.append(pl.min_horizontal(unconstrained[k].clip(lower_bound=0.0), left))
    mean_tick = pl.col("tick") / n
    value = sum((g * m for g, m in zip(gammas, multiples)), pl.lit(0.0)) * mean_tick / (pl.col("price") / n)
    return Plan(
        steps=steps,
        sums=sums,
        monthly=(
            pl.when(n > 0).then(value).alias("effective_tick"),
            n.cast(pl.Int64).alias("n_obs"),
            pl.when(pl.lit(tick_size is None)).then(pl.lit("no_tick_size"))
            .when(pl.col("traded") == 0).then(pl.lit("no_trading_days"))
            .when(n == 0).then(pl.lit("no_price_on_the_tick_grid"))
            .otherwise(None).cast(pl.String).alias("reason"),
        ),
    )


def effective_tick(daily: pl.LazyFrame, *, tick_size: float | str | None = None, multiples=DECIMAL_MULTIPLES) -> pl.LazyFrame:
    """Effective tick (Holden 2009; Goyenko, Holden & Trzcinka 2009): see the module docstring for the model.

    Days: the month's days with a trade (volume > 0) whose close lies on the
    tick grid (within ``GRID_TOLERANCE`` ticks; closes off the grid, e.g.
    adjusted prices, are not counted). ``tick_size``: the market's tick in
    its currency (the measures stage takes it from the market profile's
    ``tick_size`` unless the option gives it); ``"column"`` reads a daily
    ``tick_size`` column, for a tick that changes over time; null (a market
    without a tick, such as the demo market) gives a missing value with the
    reason "no_tick_size". ``multiples``: the candidate spreads in ticks
    (default 1, 5, 10, 25, 100: on a cent tick the cent, nickel, dime,
    quarter and dollar of Goyenko, Holden & Trzcinka 2009, from memory).
    With a changing tick the spreads are m_j x the mean tick of the days.

    Units: proportional full spread (0.01 = 1%). Assumptions: the closing
    price is uniform on the grid of the day's spread; clustering comes only
    from the spread. Outputs ``effective_tick``; ``n_obs`` days counted.

    Sources: Holden, C. W. (2009), "New low-frequency spread measures",
    Journal of Financial Markets 12(4), 778-813; Goyenko, R. Y., Holden, C.
    W. & Trzcinka, C. A. (2009), "Do liquidity measures measure liquidity?",
    Journal of Financial Economics 92(2), 153-181 (formulas from memory).
    """
    return run_plan(daily, effective_tick_plan(tick_size=tick_size, multiples=multiples))


__all__ = ["DECIMAL_MULTIPLES", "class_shares", "effective_tick", "effective_tick_plan"]
