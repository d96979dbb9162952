"""Newey & West (1987) standard error of a mean and the bandwidth rule of Newey & West (1994), shared by every model.

Kernel convention used everywhere in this package (Fama-MacBeth, Driscoll-Kraay,
sort and factor t-statistics): Bartlett weights ``1 - j / (L + 1)`` for lags
``j = 0..L`` (Newey & West 1987) and the small-sample factor ``T / (T - k)``
(``k`` estimated parameters; ``k = 1`` for a mean). When ``lags`` is ``None``
the bandwidth is the rule of thumb ``floor(4 * (T / 100) ** (2 / 9))`` of
Newey & West (1994), ``T`` the number of months.
"""

from __future__ import annotations

import math

import numpy as np


def automatic_lags(n_periods: int) -> int:
    """Newey & West (1994) rule-of-thumb bandwidth ``floor(4 * (T / 100) ** (2 / 9))``.

    ``T`` is the number of monthly observations. The result is capped at
    ``T - 1`` so that it is always usable.
    """
    if n_periods < 2:
        return 0
    return int(min(math.floor(4 * (n_periods / 100) ** (2 / 9)), n_periods - 1))


def newey_west_mean(values, lags: int | None = 6) -> dict[str, float]:
    """Mean of a time series with its Newey & West (1987) standard error.

    Formula: for ``x_1..x_T`` with mean ``m`` and deviations ``e_t = x_t - m``,
    ``S = sum_t e_t^2 + 2 * sum_{j=1..L} (1 - j / (L + 1)) * sum_{t>j} e_t e_{t-j}``
    and ``Var(m) = S / (T * (T - 1))``; ``t = m / sqrt(Var(m))``. This is the
    HAC covariance of OLS on a constant with Bartlett weights and the
    small-sample factor ``T / (T - 1)`` (with ``L = 0`` it is the plain
    ``sd / sqrt(T)``). Assumes a covariance-stationary series whose
    autocorrelation dies out within about ``L`` periods. Units: those of the
    series. Missing values (null/NaN) are removed first and the remaining
    observations are treated as consecutive. ``lags=None`` uses
    :func:`automatic_lags`; lags at or above ``T`` are capped at ``T - 1``.

    Returns a dict with ``mean``, ``std_error``, ``tstat``, ``n`` and ``lags``.
    """
    x = np.asarray(values, dtype=float).ravel()
    x = x[np.isfinite(x)]
    n = x.size
    if n == 0:
        return {"mean": float("nan"), "std_error": float("nan"), "tstat": float("nan"), "n": 0, "lags": 0}
    mean = float(x.mean())
    if n < 2:
        return {"mean": mean, "std_error": float("nan"), "tstat": float("nan"), "n": n, "lags": 0}
    lag = automatic_lags(n) if lags is None else int(min(lags, n - 1))
    e = x - mean
    s = float(e @ e)
    for j in range(1, lag + 1):
        s += 2.0 * (1.0 - j / (lag + 1)) * float(e[j:] @ e[:-j])
    var = s / (n * (n - 1))
    se = math.sqrt(var) if var > 0 else float("nan")
    tstat = mean / se if se == se and se > 0 else float("nan")
    return {"mean": mean, "std_error": se, "tstat": tstat, "n": n, "lags": lag}
