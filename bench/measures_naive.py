"""The naive baseline: every measure written the way a researcher would in pandas.

One plain function per measure takes the rows of one security-month (sorted
by date) and returns the monthly value; ``DataFrame.groupby([...]).apply``
runs it month by month. The formulas and conventions are those of the
library's docstrings (pairs of consecutive days within the month, the same
minimum numbers of observations), so on the same data the baseline gives the
same numbers; ``compare`` checks that. The market-wide inputs (the market
return of Pastor & Stambaugh, the market calendar of the zero-return share)
are computed once for the whole panel first, as a researcher would.

The Gibbs baseline is the per-month loop: the library's own single-month
sampler called once per security-month, without vectorisation across months.
"""

from __future__ import annotations

import math
import time
from typing import Callable

import numpy as np
import pandas as pd

from scipy.special import ndtri

from liqpanel.measures.gibbs import sample_roll_model
from liqpanel.measures.library import MEASURES
from liqpanel.measures.ticks import DECIMAL_MULTIPLES, class_shares

KEY = ["security", "month"]
LN2 = math.log(2.0)
K_CS = 3.0 - 2.0 * math.sqrt(2.0)


def _logs(g: pd.DataFrame):
    return np.log(g["open"].to_numpy()), np.log(g["high"].to_numpy()), np.log(g["low"].to_numpy()), np.log(g["close"].to_numpy())


def roll(g: pd.DataFrame) -> float:
    x = np.log1p(g["ret"].dropna().to_numpy())
    if len(x) < 2:
        return np.nan
    d = x - x.mean()
    gamma1 = (d[1:] * d[:-1]).sum() / len(x)
    return 2.0 * math.sqrt(-gamma1) if gamma1 < 0 else np.nan


def amihud(g: pd.DataFrame) -> float:
    ok = (g["dollar_volume"] > 0) & g["ret"].notna()
    if not ok.any():
        return np.nan
    return float((g["ret"][ok].abs() / g["dollar_volume"][ok]).mean() * 1e6)


def cs_spread(g: pd.DataFrame) -> float:
    h, l, c = g["high"].to_numpy(), g["low"].to_numpy(), g["close"].to_numpy()
    values = []
    for t in range(len(g) - 1):
        h1, l1 = h[t + 1], l[t + 1]
        gap = l1 - c[t] if l1 > c[t] else (h1 - c[t] if h1 < c[t] else 0.0)
        h1, l1 = h1 - gap, l1 - gap
        beta = math.log(h[t] / l[t]) ** 2 + math.log(h1 / l1) ** 2
        gamma = math.log(max(h[t], h1) / min(l[t], l1)) ** 2
        alpha = (math.sqrt(2 * beta) - math.sqrt(beta)) / K_CS - math.sqrt(gamma / K_CS)
        values.append(max(2 * (math.exp(alpha) - 1) / (1 + math.exp(alpha)), 0.0))
    return float(np.mean(values)) if values else np.nan


def _ar_pieces(g: pd.DataFrame) -> np.ndarray:
    _, h, l, c = _logs(g)
    eta = (h + l) / 2
    return 4 * (c[:-1] - eta[:-1]) * (c[:-1] - eta[1:])


def ar_spread_2day(g: pd.DataFrame) -> float:
    s2 = _ar_pieces(g)
    return float(np.sqrt(np.maximum(s2, 0)).mean()) if len(s2) else np.nan


def ar_spread_monthly(g: pd.DataFrame) -> float:
    s2 = _ar_pieces(g)
    return math.sqrt(max(s2.mean(), 0.0)) if len(s2) else np.nan


def edge_spread(g: pd.DataFrame) -> float:
    O, H, L, C = (g[k].to_numpy() for k in ("open", "high", "low", "close"))
    o, h, l, c = np.log(O), np.log(H), np.log(L), np.log(C)
    eta = (h + l) / 2
    r1, r2, r3 = eta[1:] - o[1:], o[1:] - eta[:-1], eta[1:] - c[:-1]
    r4, r5 = c[:-1] - eta[:-1], o[1:] - c[:-1]
    tau = ((H[1:] != L[1:]) | (L[1:] != C[:-1])).astype(float)
    if tau.sum() < 2:
        return np.nan
    po = (tau * (O[1:] != H[1:])).mean() + (tau * (O[1:] != L[1:])).mean()
    pc = (tau * (C[:-1] != H[:-1])).mean() + (tau * (C[:-1] != L[:-1])).mean()
    if po == 0 or pc == 0:
        return np.nan
    pt = tau.mean()
    d1, d3, d5 = (r - tau * r.mean() / pt for r in (r1, r3, r5))
    x1 = -4 / po * d1 * r2 - 4 / pc * d3 * r4
    x2 = -4 / po * d1 * r5 - 4 / pc * d5 * r4
    e1, e2, v1, v2 = x1.mean(), x2.mean(), x1.var(), x2.var()
    s2 = (v2 * e1 + v1 * e2) / (v1 + v2) if v1 + v2 > 0 else (e1 + e2) / 2
    return math.sqrt(abs(s2))


def vol_close(g: pd.DataFrame) -> float:
    x = np.log1p(g["ret"].dropna().to_numpy())
    return float(x.std(ddof=1)) if len(x) >= 2 else np.nan


def _range_vol(piece: np.ndarray) -> float:
    return math.sqrt(max(piece.mean(), 0.0)) if len(piece) else np.nan


def vol_parkinson(g: pd.DataFrame) -> float:
    _, h, l, _ = _logs(g)
    return _range_vol((h - l) ** 2 / (4 * LN2))


def vol_garman_klass(g: pd.DataFrame) -> float:
    o, h, l, c = _logs(g)
    return _range_vol(0.5 * (h - l) ** 2 - (2 * LN2 - 1) * (c - o) ** 2)


def _rogers_satchell(o, h, l, c) -> np.ndarray:
    return (h - c) * (h - o) + (l - c) * (l - o)


def vol_rogers_satchell(g: pd.DataFrame) -> float:
    return _range_vol(_rogers_satchell(*_logs(g)))


def vol_yang_zhang(g: pd.DataFrame) -> float:
    o, h, l, c = _logs(g)
    n = len(g) - 1
    if n < 2:
        return np.nan
    k = 0.34 / (1.34 + (n + 1) / (n - 1))
    overnight = o[1:] - c[:-1]
    variance = overnight.var(ddof=1) + k * (c[1:] - o[1:]).var(ddof=1) + (1 - k) * _rogers_satchell(
        o[1:], h[1:], l[1:], c[1:]).mean()
    return math.sqrt(max(variance, 0.0))


def _zero_share(g: pd.DataFrame, traded_only: bool) -> float:
    listed = g["_market_days"].iloc[0]  # market days of the month within the security's listed span
    days = listed - g["ret"].isna().sum()
    if days <= 0:
        return np.nan
    zero = (g["ret"] == 0) & (g["volume"] > 0) if traded_only else (g["ret"] == 0)
    no_trade = 0 if traded_only else max(listed - len(g), 0)
    return float((zero.sum() + no_trade) / days)


def zero_return_share(g: pd.DataFrame) -> float:
    return _zero_share(g, traded_only=False)


def zero_return_share_traded(g: pd.DataFrame) -> float:
    return _zero_share(g, traded_only=True)


def turnover(g: pd.DataFrame) -> float:
    shares = g["shares_out"][g["shares_out"] > 0]
    return float(g["volume"].sum() / shares.iloc[-1]) if len(shares) else np.nan


def ps_gamma(g: pd.DataFrame) -> float:
    excess = (g["ret"] - g["mkt_ret"]).to_numpy()
    x = np.column_stack([np.ones(len(g) - 1), g["ret"].to_numpy()[:-1],
                         np.sign(excess[:-1]) * g["dollar_volume"].to_numpy()[:-1] / 1e6])
    y = excess[1:]
    ok = np.isfinite(x).all(axis=1) & np.isfinite(y)
    if ok.sum() < 3:
        return np.nan
    coef, _, rank, _ = np.linalg.lstsq(x[ok], y[ok], rcond=None)
    return float(coef[2]) if rank == 3 else np.nan


def _no_trade_days(g: pd.DataFrame) -> int:
    return max(int(g["_market_days"].iloc[0]) - len(g), 0)


def fht_spread(g: pd.DataFrame) -> float:
    r = np.concatenate([g["ret"].dropna().to_numpy(), np.zeros(_no_trade_days(g))])
    z = np.mean(r == 0) if len(r) else np.nan
    if len(r) < 2 or z == 1:
        return np.nan
    return float(2.0 * np.std(r, ddof=1) * ndtri((1.0 + z) / 2.0))


def amivest(g: pd.DataFrame) -> float:
    ok = (g["dollar_volume"] > 0) & g["ret"].notna() & (g["ret"] != 0)
    if not ok.any():
        return np.nan
    return float((g["dollar_volume"][ok] / g["ret"][ok].abs()).mean() / 1e6)


def liu_lm(g: pd.DataFrame) -> float:
    shares = g["shares_out"] > 0
    if not shares.any():
        return np.nan
    turnover = (g["volume"][shares] / g["shares_out"][shares]).sum()
    if turnover <= 0:
        return np.nan
    zero = int((g["volume"] == 0).sum()) + _no_trade_days(g)
    return float((zero + (1.0 / turnover) / 11_000.0) * 21.0 / g["_market_days"].iloc[0])


TICK = 0.01  # the synthetic panel's tick (bench.measures_data)


def effective_tick(g: pd.DataFrame) -> float:
    close = g["close"][(g["volume"] > 0) & (g["close"] > 0)].to_numpy()
    units = close / TICK
    whole = np.round(units)
    whole = whole[np.abs(units - whole) <= 1e-6].astype(np.int64)
    close = close[np.abs(units - np.round(units)) <= 1e-6]
    if len(whole) == 0:
        return np.nan
    classes = np.zeros(len(whole), dtype=int)
    for j, m in enumerate(DECIMAL_MULTIPLES[1:], start=1):
        classes[whole % m == 0] = j
    frequency = np.bincount(classes, minlength=len(DECIMAL_MULTIPLES)) / len(whole)
    shares = class_shares(DECIMAL_MULTIPLES)
    unconstrained, gamma = [], []
    for k in range(len(DECIMAL_MULTIPLES)):
        unconstrained.append((frequency[k] - sum(shares[k, j] * unconstrained[j] for j in range(k))) / shares[k, k])
        gamma.append(min(max(unconstrained[k], 0.0), 1.0 - sum(gamma)))
    return float(sum(gm * m * TICK for gm, m in zip(gamma, DECIMAL_MULTIPLES)) / close.mean())


FUNCTIONS: dict[str, Callable[[pd.DataFrame], float]] = {
    "roll_spread": roll, "amihud": amihud, "cs_spread": cs_spread, "ar_spread_2day": ar_spread_2day,
    "ar_spread_monthly": ar_spread_monthly, "edge_spread": edge_spread, "vol_close": vol_close,
    "vol_parkinson": vol_parkinson, "vol_garman_klass": vol_garman_klass,
    "vol_rogers_satchell": vol_rogers_satchell, "vol_yang_zhang": vol_yang_zhang,
    "zero_return_share": zero_return_share, "zero_return_share_traded": zero_return_share_traded,
    "turnover": turnover, "ps_gamma": ps_gamma, "fht_spread": fht_spread, "amivest": amivest, "liu_lm": liu_lm,
    "effective_tick": effective_tick,
}
# Options the library needs to compute what the baseline computes on the synthetic panel.
OPTIONS: dict[str, dict] = {"effective_tick": {"tick_size": TICK}}
MIN_DAYS = {m.name: m.min_days for m in MEASURES}
# The library counts, for each measure, the observations its minimum applies to.
N_OBS: dict[str, Callable[[pd.DataFrame], int]] = {
    "roll_spread": lambda g: int(g["ret"].notna().sum()),
    "amihud": lambda g: int(((g["dollar_volume"] > 0) & g["ret"].notna()).sum()),
    "vol_close": lambda g: int(g["ret"].notna().sum()),
    "vol_parkinson": len, "vol_garman_klass": len, "vol_rogers_satchell": len, "turnover": len,
    "zero_return_share": lambda g: int(g["_market_days"].iloc[0] - g["ret"].isna().sum()),
    "zero_return_share_traded": lambda g: int(g["_market_days"].iloc[0] - g["ret"].isna().sum()),
    "ps_gamma": lambda g: _ps_pairs(g),
    "fht_spread": lambda g: int(g["_market_days"].iloc[0] - g["ret"].isna().sum()),
    "amivest": lambda g: int(((g["dollar_volume"] > 0) & g["ret"].notna() & (g["ret"] != 0)).sum()),
    "liu_lm": lambda g: int(g["_market_days"].iloc[0]),
    "effective_tick": lambda g: int((g["volume"] > 0).sum()),
}


def _ps_pairs(g: pd.DataFrame) -> int:
    excess = (g["ret"] - g["mkt_ret"]).to_numpy()
    today = np.isfinite(excess[:-1]) & np.isfinite(g["dollar_volume"].to_numpy()[:-1])
    return int((today & np.isfinite(excess[1:])).sum())


def prepare(daily: pd.DataFrame) -> pd.DataFrame:
    """Sort, and add the market-wide inputs: the equal-weighted market return and each month's market days."""
    daily = daily.sort_values(["security", "date"]).reset_index(drop=True)
    daily["mkt_ret"] = daily.groupby("date")["ret"].transform("mean")
    calendar = pd.DataFrame({"date": np.sort(daily["date"].unique())})
    calendar["month"] = daily.drop_duplicates("date").set_index("date").loc[calendar["date"], "month"].to_numpy()
    span = daily.groupby("security")["date"].agg(["min", "max"])
    first = daily["security"].map(span["min"])
    last = daily["security"].map(span["max"])
    month_days = calendar.groupby("month")["date"].agg(["min", "max"])
    lo = np.maximum(daily["month"].map(month_days["min"]), first)
    hi = np.minimum(daily["month"].map(month_days["max"]), last)
    dates = calendar["date"].to_numpy()
    daily["_market_days"] = np.searchsorted(dates, hi.to_numpy(), side="right") - np.searchsorted(dates, lo.to_numpy())
    return daily


def _with_minimum(name: str) -> Callable[[pd.DataFrame], float]:
    """The measure's function, missing below its minimum number of observations."""
    function, count, minimum = FUNCTIONS[name], N_OBS.get(name, lambda g: len(g) - 1), MIN_DAYS[name]
    return lambda g: function(g) if count(g) >= minimum else np.nan


def monthly(daily: pd.DataFrame, names: list[str]) -> pd.DataFrame:
    """Every named measure per security-month: one groupby-apply per measure."""
    groups = daily.groupby(KEY, sort=True)
    out = {name: groups.apply(_with_minimum(name), include_groups=False) for name in names}
    return pd.DataFrame(out).reset_index()


def time_monthly(path: str, names: list[str], securities: list[str] | None = None) -> tuple[float, int, pd.DataFrame]:
    """Read the panel (or the given securities of it) with pandas and compute ``names``; seconds, rows, result."""
    started = time.perf_counter()
    filters = [("security", "in", securities)] if securities is not None else None
    daily = prepare(pd.read_parquet(path, filters=filters))
    result = monthly(daily, names)
    return time.perf_counter() - started, len(daily), result


def gibbs_per_month(path: str, securities: list[str], *, months: int, sweeps: int, burn: int,
                    seed: int) -> tuple[float, int]:
    """The per-month loop over the first ``months`` security-months with returns; seconds and months run.

    Each month's daily log price changes go to the library's sampler as one
    column, so the loop runs the same algorithm without vectorisation across
    months.
    """
    started = time.perf_counter()
    daily = pd.read_parquet(path, columns=["security", "month", "date", "ret"], filters=[("security", "in", securities)])
    rng = np.random.default_rng(seed)
    done = 0
    for _, g in daily.sort_values(["security", "date"]).groupby(KEY, sort=True):
        dp = np.log1p(g["ret"].dropna().to_numpy())
        if len(dp) < 3:  # the library's minimum for a posterior mean of sigma_u^2
            continue
        draws = sample_roll_model(dp[:, None], np.ones((len(dp), 1), dtype=bool), sweeps=sweeps, burn=burn, rng=rng)
        _ = 2.0 * draws.half_spread.mean()
        done += 1
        if done == months:
            break
    return time.perf_counter() - started, done


def lot_per_month(path: str, securities: list[str], *, months: int) -> tuple[float, int]:
    """The LOT fits (both forms) one security-month at a time with scipy's general optimiser: seconds, months fitted.

    The same likelihood as the library (``liqpanel.measures.lot.log_likelihood``, one month as a column),
    maximised by ``scipy.optimize.minimize`` (BFGS with the analytic gradient) from the same starting values.
    """
    from scipy.optimize import minimize

    from liqpanel.measures.lot import FORMS, log_likelihood, regions, starting_values

    daily = prepare(pd.read_parquet(path, columns=["security", "date", "month", "ret"]))
    daily = daily[daily["security"].isin(securities)].dropna(subset=["ret", "mkt_ret"])
    groups = [g for _, g in daily.groupby(KEY, sort=True) if len(g) >= 15][:months]
    started = time.perf_counter()
    for g in groups:
        r, x = g["ret"].to_numpy()[:, None], g["mkt_ret"].to_numpy()[:, None]
        valid = np.ones_like(r, dtype=bool)
        for form in FORMS:
            masks = regions(r, x, form)

            def negative(theta, masks=masks, r=r, x=x, valid=valid):
                ll, grad = log_likelihood(theta[:, None], r, x, masks, valid)
                return -ll[0], -grad[:, 0]

            with np.errstate(all="ignore"):
                minimize(negative, starting_values(r, x, valid)[:, 0], jac=True, method="BFGS")
    return time.perf_counter() - started, len(groups)


__all__ = ["FUNCTIONS", "OPTIONS", "lot_per_month", "gibbs_per_month", "monthly", "prepare", "time_monthly"]
