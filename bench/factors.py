"""Rolling liquidity betas: all windows at once against a loop over securities and windows.

``liqpanel.factors.betas.liquidity_betas`` fits every security's rolling
regression from rolling sums of cross products and one stacked solve. The
naive baseline, run side by side on the same invented panel, loops over
securities and months and calls ``numpy.linalg.lstsq`` on each window, the
way a first script would. Both results are compared (largest absolute
difference of the betas) before the times count.

Run: ``make bench-factors`` (or ``python -m bench.factors --help``). No
assertion is made on time: the printed table is the result.
"""

from __future__ import annotations

import argparse
import datetime as dt
import time

import numpy as np
import polars as pl

from liqpanel.factors.betas import liquidity_betas


def _panel(n_sec: int, n_months: int, seed: int) -> tuple[pl.DataFrame, pl.DataFrame]:
    rng = np.random.default_rng(seed)
    months = pl.date_range(dt.date(1990, 1, 1), dt.date(2100, 1, 1), "1mo", eager=True).head(n_months)
    mkt, liq = rng.normal(0.008, 0.045, n_months), rng.normal(0, 0.01, n_months)
    beta = rng.normal(0, 2, n_sec)
    ret = mkt[None, :] + beta[:, None] * liq[None, :] + rng.normal(0, 0.05, (n_sec, n_months))
    ret[rng.random(ret.shape) < 0.05] = np.nan
    returns = pl.DataFrame({
        "security": np.repeat([f"S{i:05d}" for i in range(n_sec)], n_months),
        "month": months.to_list() * n_sec, "ret": ret.ravel(),
    }).filter(pl.col("ret").is_not_nan())
    return returns, pl.DataFrame({"month": months, "mkt": mkt, "liq_innovation": liq})


def _naive(returns: pl.DataFrame, regressors: pl.DataFrame, window: int, min_months: int) -> dict:
    months = regressors.get_column("month").to_list()
    x_all = np.column_stack([np.ones(len(months)), regressors.get_column("mkt").to_numpy(),
                             regressors.get_column("liq_innovation").to_numpy()])
    out = {}
    for (sec,), rows in returns.partition_by("security", as_dict=True).items():
        y = np.full(len(months), np.nan)
        index = {m: i for i, m in enumerate(months)}
        for m, r in zip(rows.get_column("month").to_list(), rows.get_column("ret").to_list()):
            y[index[m]] = r
        for t in range(len(months)):
            lo = max(0, t - window + 1)
            ok = ~np.isnan(y[lo:t + 1])
            if ok.sum() >= min_months:
                coef, *_ = np.linalg.lstsq(x_all[lo:t + 1][ok], y[lo:t + 1][ok], rcond=None)
                out[(sec, months[t])] = coef[2]
    return out


def main(argv: list[str] | None = None) -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--securities", type=int, default=1000)
    p.add_argument("--months", type=int, default=240)
    p.add_argument("--window", type=int, default=60)
    p.add_argument("--min-months", type=int, default=36)
    p.add_argument("--seed", type=int, default=5)
    args = p.parse_args(argv)
    returns, regressors = _panel(args.securities, args.months, args.seed)

    start = time.perf_counter()
    ours = liquidity_betas(returns, regressors, window=args.window, min_months=args.min_months)
    fast = time.perf_counter() - start
    start = time.perf_counter()
    naive = _naive(returns, regressors, args.window, args.min_months)
    slow = time.perf_counter() - start

    mine = dict(zip(zip(ours.get_column("security").to_list(), ours.get_column("month").to_list()),
                    ours.get_column("liq_beta").to_list()))
    if set(mine) != set(naive):
        raise SystemExit(f"the two methods fit different windows: {len(mine)} against {len(naive)}")
    gap = max(abs(mine[k] - naive[k]) for k in naive)
    print(f"rolling liquidity betas: {args.securities} securities x {args.months} months, window {args.window} "
          f"(at least {args.min_months}); {len(naive)} regressions")
    print(f"| method | seconds | ratio |\n|---|---:|---:|\n| stacked (liqpanel) | {fast:.2f} | 1.0 |\n"
          f"| loop with lstsq | {slow:.2f} | {slow / fast:.1f} |")
    print(f"largest difference of the betas: {gap:.2e}")


if __name__ == "__main__":
    main()
