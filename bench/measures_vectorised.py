"""The second baseline: every measure as a researcher fluent in pandas writes it.

Whole-column arithmetic, ``groupby(...).shift`` for the previous day within a
security-month, ``groupby(...).agg``/``transform`` for the monthly sums and
means; no ``apply`` and no Python loop over groups. The formulas and
conventions are those of ``bench.measures_naive`` (pairs of consecutive days
within the month, the same minimum numbers of observations, the same
market-wide inputs from ``prepare``), so on the same data all three (this,
the naive baseline and the library) give the same numbers; the benchmark's
tests check that.
"""

from __future__ import annotations

import time

import numpy as np
import pandas as pd
from scipy.special import ndtri

from bench.measures_naive import FUNCTIONS as NAIVE_FUNCTIONS
from bench.measures_naive import K_CS, KEY, LN2, MIN_DAYS, prepare


def _mask(value: pd.Series, count: pd.Series, minimum: int) -> pd.Series:
    """The value where the observations reach the measure's minimum, missing elsewhere."""
    return value.where(count >= minimum)


class _Month:
    """Shared per-row columns of a prepared panel: logs, the previous day within the security-month, group ids."""

    def __init__(self, daily: pd.DataFrame):
        self.d = daily
        self.groups = daily.groupby(KEY, sort=True)
        self.index = self.groups.size().index
        self.rows = self.groups.size()
        self.pairs = self.rows - 1
        self._cache: dict[str, pd.Series] = {}

    def col(self, name: str) -> pd.Series:
        if name not in self._cache:
            if name.startswith("log_"):
                self._cache[name] = np.log(self.d[name[4:]])
            elif name.startswith("prev_"):
                self._cache[name] = self.groups[name[5:]].shift(1) if name[5:] in self.d else \
                    self.col(name[5:]).groupby(self.keys()).shift(1)
            else:
                return self.d[name]
        return self._cache[name]

    def agg(self, values: pd.Series, how: str = "mean", **kw) -> pd.Series:
        """One monthly aggregate of a per-row column (rows with a missing value skipped), on every security-month."""
        return getattr(values.groupby(self.keys(), sort=True), how)(**kw).reindex(self.index)

    def spread(self, values: pd.Series) -> pd.Series:
        """The monthly mean of a per-row column, back on every row of its security-month."""
        return values.groupby(self.keys()).transform("mean")

    def keys(self) -> list[pd.Series]:
        return [self.d[k] for k in KEY]


def roll_spread(m: _Month) -> pd.Series:
    x = np.log1p(m.col("ret"))  # missing returns stay missing and drop out of every sum
    n = m.agg(x, "count")
    d = x - m.spread(x)
    lagged = d.groupby(m.keys()).ffill().groupby(m.keys()).shift(1)  # the last observed return before the day
    gamma1 = m.agg(d * lagged, "sum") / n
    value = 2.0 * np.sqrt(-gamma1.where(gamma1 < 0))
    return _mask(value.where(n >= 2), n, MIN_DAYS["roll_spread"])


def amihud(m: _Month) -> pd.Series:
    ok = (m.col("dollar_volume") > 0) & m.col("ret").notna()
    value = m.agg((m.col("ret").abs() / m.col("dollar_volume")).where(ok)) * 1e6
    return _mask(value, m.agg(ok, "sum"), MIN_DAYS["amihud"])


def cs_spread(m: _Month) -> pd.Series:
    h0, l0, c0 = m.col("prev_high"), m.col("prev_low"), m.col("prev_close")
    h1, l1 = m.col("high"), m.col("low")
    gap = np.where(l1 > c0, l1 - c0, np.where(h1 < c0, h1 - c0, 0.0))
    h1, l1 = h1 - gap, l1 - gap
    beta = np.log(h0 / l0) ** 2 + np.log(h1 / l1) ** 2
    gamma = np.log(np.maximum(h0, h1) / np.minimum(l0, l1)) ** 2
    alpha = (np.sqrt(2 * beta) - np.sqrt(beta)) / K_CS - np.sqrt(gamma / K_CS)
    spread = np.maximum(2 * (np.exp(alpha) - 1) / (1 + np.exp(alpha)), 0.0).where(c0.notna())
    return _mask(m.agg(spread), m.pairs, MIN_DAYS["cs_spread"])


def _ar_pieces(m: _Month) -> pd.Series:
    eta = (m.col("log_high") + m.col("log_low")) / 2
    eta0 = (m.col("prev_log_high") + m.col("prev_log_low")) / 2
    c0 = m.col("prev_log_close")
    return 4 * (c0 - eta0) * (c0 - eta)


def ar_spread_2day(m: _Month) -> pd.Series:
    return _mask(m.agg(np.sqrt(_ar_pieces(m).clip(lower=0))), m.pairs, MIN_DAYS["ar_spread_2day"])


def ar_spread_monthly(m: _Month) -> pd.Series:
    return _mask(np.sqrt(m.agg(_ar_pieces(m)).clip(lower=0)), m.pairs, MIN_DAYS["ar_spread_monthly"])


def edge_spread(m: _Month) -> pd.Series:
    O1, H1, L1 = m.col("open"), m.col("high"), m.col("low")
    H0, L0, C0 = m.col("prev_high"), m.col("prev_low"), m.col("prev_close")
    o1, c0 = m.col("log_open"), m.col("prev_log_close")
    eta1 = (m.col("log_high") + m.col("log_low")) / 2
    eta0 = (m.col("prev_log_high") + m.col("prev_log_low")) / 2
    pair = C0.notna()
    r1, r2, r3, r4, r5 = (eta1 - o1).where(pair), o1 - eta0, eta1 - c0, c0 - eta0, o1 - c0
    tau = ((H1 != L1) | (L1 != C0)).astype(float).where(pair)
    po = m.spread(tau * (O1 != H1)) + m.spread(tau * (O1 != L1))
    pc = m.spread(tau * (C0 != H0)) + m.spread(tau * (C0 != L0))
    pt = m.spread(tau)
    d1, d3, d5 = (r - tau * m.spread(r) / pt for r in (r1, r3, r5))
    k_o, k_c = -4 / po.where(po != 0), -4 / pc.where(pc != 0)
    x1 = k_o * d1 * r2 + k_c * d3 * r4
    x2 = k_o * d1 * r5 + k_c * d5 * r4
    e1, e2, v1, v2 = m.agg(x1), m.agg(x2), m.agg(x1, "var", ddof=0), m.agg(x2, "var", ddof=0)
    s2 = ((v2 * e1 + v1 * e2) / (v1 + v2)).where(v1 + v2 > 0, (e1 + e2) / 2)
    value = np.sqrt(s2.abs()).where(m.agg(tau, "sum") >= 2)
    return _mask(value, m.pairs, MIN_DAYS["edge_spread"])


def vol_close(m: _Month) -> pd.Series:
    x = np.log1p(m.col("ret"))
    n = m.agg(x, "count")
    return _mask(m.agg(x, "std", ddof=1).where(n >= 2), n, MIN_DAYS["vol_close"])


def _range_vol(m: _Month, piece: pd.Series, name: str) -> pd.Series:
    return _mask(np.sqrt(m.agg(piece).clip(lower=0)), m.rows, MIN_DAYS[name])


def _rogers_satchell(m: _Month) -> pd.Series:
    o, h, l, c = (m.col(f"log_{k}") for k in ("open", "high", "low", "close"))
    return (h - c) * (h - o) + (l - c) * (l - o)


def vol_parkinson(m: _Month) -> pd.Series:
    return _range_vol(m, (m.col("log_high") - m.col("log_low")) ** 2 / (4 * LN2), "vol_parkinson")


def vol_garman_klass(m: _Month) -> pd.Series:
    o, h, l, c = (m.col(f"log_{k}") for k in ("open", "high", "low", "close"))
    return _range_vol(m, 0.5 * (h - l) ** 2 - (2 * LN2 - 1) * (c - o) ** 2, "vol_garman_klass")


def vol_rogers_satchell(m: _Month) -> pd.Series:
    return _range_vol(m, _rogers_satchell(m), "vol_rogers_satchell")


def vol_yang_zhang(m: _Month) -> pd.Series:
    pair = m.col("prev_close").notna()
    n = m.pairs
    k = 0.34 / (1.34 + (n + 1) / (n - 1))
    overnight = (m.col("log_open") - m.col("prev_log_close")).where(pair)
    intraday = (m.col("log_close") - m.col("log_open")).where(pair)
    variance = m.agg(overnight, "var", ddof=1) + k * m.agg(intraday, "var", ddof=1) + (1 - k) * m.agg(
        _rogers_satchell(m).where(pair))
    return _mask(np.sqrt(variance.clip(lower=0)).where(n >= 2), n, MIN_DAYS["vol_yang_zhang"])


def _zero_share(m: _Month, traded_only: bool, name: str) -> pd.Series:
    listed = m.agg(m.col("_market_days"), "first")
    days = listed - m.agg(m.col("ret").isna(), "sum")
    zero = (m.col("ret") == 0) & (m.col("volume") > 0) if traded_only else (m.col("ret") == 0)
    no_trade = 0 if traded_only else (listed - m.rows).clip(lower=0)
    value = ((m.agg(zero, "sum") + no_trade) / days).where(days > 0)
    return _mask(value, days, MIN_DAYS[name])


def zero_return_share(m: _Month) -> pd.Series:
    return _zero_share(m, False, "zero_return_share")


def zero_return_share_traded(m: _Month) -> pd.Series:
    return _zero_share(m, True, "zero_return_share_traded")


def turnover(m: _Month) -> pd.Series:
    shares = m.agg(m.col("shares_out").where(m.col("shares_out") > 0), "last")
    return _mask(m.agg(m.col("volume"), "sum") / shares, m.rows, MIN_DAYS["turnover"])


def ps_gamma(m: _Month) -> pd.Series:
    """The Pastor & Stambaugh slope from monthly sums: the centred normal equations of the two regressors."""
    excess = m.col("ret") - m.col("mkt_ret")
    a = m.col("prev_ret")
    b = np.sign(excess.groupby(m.keys()).shift(1)) * m.col("prev_dollar_volume") / 1e6
    ok = np.isfinite(a) & np.isfinite(b) & np.isfinite(excess)
    a, b, y = a.where(ok), b.where(ok), excess.where(ok)
    n = m.agg(ok, "sum")

    def centred(u: pd.Series, v: pd.Series) -> pd.Series:
        return m.agg(u * v, "sum") - m.agg(u, "sum") * m.agg(v, "sum") / n

    s11, s22, s12 = centred(a, a), centred(b, b), centred(a, b)
    det = s11 * s22 - s12 * s12
    gamma = (s11 * centred(b, y) - s12 * centred(a, y)) / det
    singular = (n < 3) | (s11 <= 0) | (s22 <= 0) | (det <= 1e-8 * s11 * s22)
    return _mask(gamma.where(~singular), n, MIN_DAYS["ps_gamma"])


def _no_trade_days(m: _Month) -> pd.Series:
    return (m.agg(m.col("_market_days"), "first") - m.rows).clip(lower=0)


def fht_spread(m: _Month) -> pd.Series:
    """2 sd(r) Phi^-1((1 + z) / 2) over the returns, a no-trade day counting as a zero return."""
    r = m.col("ret")
    days = m.agg(r, "count") + _no_trade_days(m)
    total, squares = m.agg(r, "sum"), m.agg(r * r, "sum")
    z = (m.agg(r == 0, "sum") + _no_trade_days(m)) / days
    sd = np.sqrt(((squares - total * total / days) / (days - 1)).clip(lower=0))
    value = (2.0 * sd * ndtri((1.0 + z) / 2.0)).where((days >= 2) & (z < 1))
    return _mask(value, m.agg(m.col("_market_days"), "first") - m.agg(r.isna(), "sum"), MIN_DAYS["fht_spread"])


def amivest(m: _Month) -> pd.Series:
    ok = (m.col("dollar_volume") > 0) & m.col("ret").notna() & (m.col("ret") != 0)
    value = m.agg((m.col("dollar_volume") / m.col("ret").abs()).where(ok)) / 1e6
    return _mask(value, m.agg(ok, "sum"), MIN_DAYS["amivest"])


def liu_lm(m: _Month) -> pd.Series:
    shares = m.col("shares_out").where(m.col("shares_out") > 0)
    turnover = m.agg(m.col("volume") / shares, "sum", min_count=1)
    zero = m.agg(m.col("volume") == 0, "sum") + _no_trade_days(m)
    listed = m.agg(m.col("_market_days"), "first")
    value = ((zero + (1.0 / turnover) / 11_000.0) * 21.0 / listed).where(turnover > 0)
    return _mask(value, listed, MIN_DAYS["liu_lm"])


# One function per measure, named after it, in the naive baseline's order: every measure of daily bars but
# the effective tick (its price-cluster shares are no groupby aggregate; a family holding it is timed here
# without it, so its ratio understates ours).
FUNCTIONS = {name: globals()[name] for name in NAIVE_FUNCTIONS if name in globals()}


def monthly(daily: pd.DataFrame, names: list[str]) -> pd.DataFrame:
    """Every named measure per security-month from a prepared panel, by whole-column groupby aggregates."""
    m = _Month(daily)
    return pd.DataFrame({name: FUNCTIONS[name](m) for name in names}, index=m.index).reset_index()


def time_monthly(path: str, names: list[str]) -> tuple[float, int, pd.DataFrame]:
    """Read the whole panel with pandas and compute ``names``; seconds, rows, result."""
    started = time.perf_counter()
    daily = prepare(pd.read_parquet(path))
    result = monthly(daily, names)
    return time.perf_counter() - started, len(daily), result


__all__ = ["FUNCTIONS", "monthly", "time_monthly"]
