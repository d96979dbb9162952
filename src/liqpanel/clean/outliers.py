"""The outlier filter of Brownlees & Gallo (2006) for tick-by-tick prices.

Brownlees, C. T. and G. M. Gallo (2006), "Financial econometric analysis at
ultra-high frequency: data handling concerns", Computational Statistics &
Data Analysis 51, 2232-2245 (citation and rule from memory).

A price p_i is kept when

    |p_i - pbar_i(k)| < threshold * s_i(k) + gamma,

where pbar_i(k) and s_i(k) are the delta-trimmed sample mean and standard
deviation of a neighbourhood of k observations around i, i itself excluded
(k/2 before and k/2 after; at the start and end of a day the neighbourhood
is shifted so that it still holds k observations of the same day). gamma is
a granularity term in price units that stops runs of k equal prices (s = 0)
from flagging a one-tick move. The threshold is 3 in the paper (from
memory); k, delta and gamma are the paper's parameters.

Conventions of this project (options in the config): ``delta`` is the total
share trimmed, half from each tail: floor(delta * k / 2) observations are cut
from each end of the sorted neighbourhood (as ``scipy.stats.trim_mean`` does
with ``proportiontocut = delta / 2``); s uses the divisor (m - 1) for the m
observations kept. A day with k or fewer observations has no full
neighbourhood and is not filtered (its rows are kept by this rule).

The computation is vectorised over all security-days at once: an index
matrix of neighbourhoods, processed in chunks of rows to bound memory.
"""

from __future__ import annotations

import math

import numpy as np

CHUNK_ROWS = 100_000


def neighbourhood_outliers(
    group: np.ndarray,
    price: np.ndarray,
    *,
    k: int = 20,
    delta: float = 0.10,
    gamma: float = 0.02,
    threshold: float = 3.0,
    chunk_rows: int = CHUNK_ROWS,
) -> np.ndarray:
    """True where the Brownlees & Gallo (2006) rule flags the price as an outlier.

    ``group`` labels each row's security-day; rows of a group must be
    contiguous and in time order. ``price`` in currency units. Returns a
    boolean array aligned with the inputs.
    """
    if k < 2 or k % 2:
        raise ValueError(f"outliers: k must be an even number >= 2, got {k}")
    if not 0 <= delta < 1:
        raise ValueError(f"outliers: delta must be a share in [0, 1), got {delta}")
    n = len(price)
    flagged = np.zeros(n, dtype=bool)
    if n == 0:
        return flagged
    group = np.asarray(group)
    price = np.asarray(price, dtype=np.float64)
    change = np.flatnonzero(group[1:] != group[:-1]) + 1
    starts = np.concatenate(([0], change))
    sizes = np.diff(np.concatenate((starts, [n])))
    start_of = np.repeat(starts, sizes)
    size_of = np.repeat(sizes, sizes)
    position = np.arange(n) - start_of
    eligible = np.flatnonzero(size_of > k)
    cut = int(math.floor(delta * k / 2 + 1e-9))
    kept = k - 2 * cut
    offsets = np.arange(k + 1)
    for lo in range(0, len(eligible), chunk_rows):
        rows = eligible[lo : lo + chunk_rows]
        first = np.clip(position[rows] - k // 2, 0, size_of[rows] - (k + 1)) + start_of[rows]
        window = first[:, None] + offsets[None, :]  # k + 1 rows holding i
        others = window[window != rows[:, None]].reshape(len(rows), k)
        values = np.sort(price[others], axis=1)[:, cut : k - cut]
        mean = values.mean(axis=1)
        sd = values.std(axis=1, ddof=1) if kept > 1 else np.zeros(len(rows))
        flagged[rows] = np.abs(price[rows] - mean) >= threshold * sd + gamma
    return flagged
