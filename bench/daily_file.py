"""Reading a user's daily file: once, checked and audited, against one read per month.

An invented market of ``--securities`` securities over ``--years`` years of
weekdays (a random walk, written as a vendor CSV with YYYYMMDD integer
dates) is read three ways, each timed on its own:

- ours: ``liqpanel.bars.daily_file.read_daily`` once (every value converted and
  checked, every row audited, returns computed), then one filter per month;
- per month: what a workflow with one daily job per month costs when each
  job scans the whole file and keeps its month (no checks, no audit);
- floor: one plain read of the file with guessed types and nothing else.

Run: ``python -m bench.daily_file --help`` (``make bench-daily``). No
assertion is made on time: the table is the result.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np
import polars as pl

MAPPING = {"Sym": "security", "Day": "date", "Open": "open", "High": "high", "Low": "low", "Close": "close",
           "Qty": "volume"}


def make_file(path: Path, securities: int, years: int, seed: int) -> int:
    days = pl.date_range(pl.date(2001, 1, 1), pl.date(2000 + years, 12, 31), "1d", eager=True)
    days = days.filter(days.dt.weekday() <= 5)
    rng = np.random.default_rng(seed)
    n = securities * days.len()
    steps = rng.normal(0, 0.02, size=(securities, days.len()))
    close = 20 * np.exp(np.cumsum(steps, axis=1)).ravel()
    spread = np.abs(rng.normal(0, 0.01, n)) + 0.002
    frame = pl.DataFrame({
        "Sym": np.repeat([f"S{i:05d}" for i in range(securities)], days.len()),
        "Day": np.tile(days.dt.strftime("%Y%m%d").cast(pl.Int64).to_numpy(), securities),
        "Open": close * (1 + rng.uniform(-0.5, 0.5, n) * spread), "High": close * (1 + spread),
        "Low": close * (1 - spread), "Close": close, "Qty": rng.integers(100, 10_000, n).astype(float),
    })
    frame.write_csv(path, float_precision=6)
    return n


def timed(label: str, work) -> float:
    start = time.perf_counter()
    work()
    seconds = time.perf_counter() - start
    print(f"{label:<44s} {seconds:8.2f} s", flush=True)
    return seconds


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--securities", type=int, default=500)
    parser.add_argument("--years", type=int, default=4)
    parser.add_argument("--seed", type=int, default=20240101)
    args = parser.parse_args(argv)

    from liqpanel import ingest
    from liqpanel.bars import daily_file as dailyfile
    from liqpanel.core.io import month_range

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "daily.csv"
        rows = make_file(path, args.securities, args.years, args.seed)
        months = month_range("2001-01", f"{2000 + args.years}-12")
        print(f"{rows:,} rows, {len(months)} months, {path.stat().st_size / 1e6:.0f} MB of CSV")
        sample = (months[0], months[-1])

        def ours():
            layout = ingest.layout_from("daily", str(path), MAPPING, None)
            read = dailyfile.read_daily(layout, {}, sample)
            for month in months:
                read.daily.filter(pl.col("month") == pl.lit(f"{month}-01").str.to_date())

        def per_month():
            for month in months:
                pl.scan_csv(path).filter(pl.col("Day") // 100 == int(month.replace("-", ""))).collect()

        ours_s = timed("ours: read, check, audit once", ours)
        naive_s = timed(f"per month: {len(months)} scans of the whole file", per_month)
        floor_s = timed("floor: one plain read", lambda: pl.read_csv(path))
        print(f"per month / ours: {naive_s / ours_s:.1f}x; ours / floor: {ours_s / floor_s:.1f}x")


if __name__ == "__main__":
    main()
