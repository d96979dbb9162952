"""How the workflow's jobs scale: markets of 1x, 4x and 16x a base size.

The base market is ``--base-months`` months of ``--securities`` invented
securities (``liqpanel.simulate``); the 4x and 16x markets are its first 4
and 16 times as many months (same securities, about the same trades per
month), each written as one trade file in time order, as vendors deliver
them. Each market goes through the workflow's jobs exactly as Snakemake runs
them: one process per stage and span of ``--span`` months (clean + bars,
daily, measures; a calendar year by default), ``--jobs`` at a time, each
polars query limited to ``--threads`` threads. For every size it reports the
wall time, the CPU time of all jobs with their start-up, trades per CPU
second of the whole chain and of clean + bars alone, and the peak resident
memory of each kind of job (the largest over its spans, measured by the
operating system for each process). Cleaning applies the missing-field,
sample, non-positive, session and duplicate rules (the outlier filter and
the same-time merge are off, as in the pandas script).

Side by side on the 1x and 4x markets (``--pandas-sizes``): a naive pandas
script that loads the whole trade file and computes the same daily table and
the Roll and Amihud measures in one process; its results are checked against
ours before its time counts. Below the table: the number of jobs the
workflow plans for 2 and 20 years of data, against one job per month and
stage, and the CPU time a job spends starting (Python, polars and the stage
modules).

Run: ``make bench-scale`` (or ``python -m bench.scale --help``). No assertion is
made on time: the table is the result.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import tempfile
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import polars as pl

STAGES = ("trades", "daily", "measures")  # the workflow's jobs per span: clean + bars, daily, measures
MEASURES = {"roll_spread": {"convention": "missing"}, "amihud": None}
# the rules the pandas script applies too: the outlier filter and the merge of
# same-time records are off, so both compute the same numbers
CLEANING = {"same_timestamp": "keep", "outliers": None}
REPO = Path(__file__).resolve().parents[1]


# ---------------------------------------------------------------- markets


def make_markets(root: Path, sizes: list[int], securities: int, seed: int, order: str = "time") -> dict[int, Path]:
    """Simulate max(sizes) months once; write the first k months as the market of k months.

    ``order``: "time" writes the trades in time order (a month's rows share
    row groups, which the month window skips), "security" by security first
    (every row group spans every month, so each month's job reads them all).
    """
    from liqpanel.simulate import simulate_market

    market = simulate_market(
        n_securities=securities, n_months=max(sizes), seed=seed, start="2021-01",
        intensity_center=150.0, intensity_range=(20.0, 1000.0), bad_row_share=0.002,
    )
    trades = market.trades.drop("true_sign").sort(*(("ts", "security") if order == "time" else ("security", "ts")))
    local_month = pl.col("ts").dt.convert_time_zone(market.spec.tz).dt.strftime("%Y-%m")
    months = month_list(max(sizes))
    paths = {}
    for k in sizes:
        path = root / f"months{k}" / "trades.parquet"
        path.parent.mkdir(parents=True)
        trades.filter(local_month <= months[k - 1]).write_parquet(path, row_group_size=65_536, statistics=True)
        paths[k] = path
    return paths


def month_list(n: int) -> list[str]:
    from liqpanel.core.io import month_range

    first = 2021 * 12
    last = first + n - 1
    return month_range("2021-01", f"{last // 12:04d}-{last % 12 + 1:02d}")


def config_for(trades: Path, n_months: int) -> dict:
    from liqpanel.config import validate_config

    months = month_list(n_months)
    return validate_config(
        {"sample": {"start": months[0], "end": months[-1]}, "market": "demo",
         "inputs": {"trades": str(trades)}, "measures": MEASURES, "clean": CLEANING},
        source="benchmark",
    )


# ---------------------------------------------------------------- one job per process


def job_main(spec: dict) -> None:
    """Run one stage of one span (the body of one workflow job) and print its seconds."""
    paths, stage = spec.get("paths", {}), spec["stage"]
    if stage in ("trades", "start"):  # the start: what a clean + bars job costs before its work
        from liqpanel.bars.job import run_bars as job
    elif stage == "daily":
        from liqpanel.bars.daily_job import run_daily as job
    elif stage == "measures":
        from liqpanel.measures.job import run_measures as job
    if stage in ("trades", "daily", "measures", "start"):
        from liqpanel.core.settings import for_job

        sections = for_job(json.loads(Path(spec["config"]).read_text()), job) if spec.get("config") else {}
    start = time.process_time()
    if stage == "trades":
        job(spec["months"], {k: paths[k] for k in ("trades", "audit", "quotes", "bars")}, **sections)
    elif stage == "daily":
        job(paths["bars"], spec.get("previous_bars"), paths["daily"], **sections)
    elif stage == "measures":
        job(paths["daily"], spec.get("previous_daily"), paths["measures"], **sections)
    elif stage == "start":
        pass
    elif stage == "pandas":
        pandas_monthly(spec["trades"], spec["months"]).to_parquet(spec["out"])
    else:
        raise ValueError(f"unknown stage {stage!r}")
    used = os.times()
    print(json.dumps({"cpu": time.process_time() - start, "process_cpu": used.user + used.system,
                      "peak_mb": peak_memory_mb()}))


def peak_memory_mb() -> float:
    """This process's peak resident memory (VmHWM; unlike getrusage it does not
    inherit the parent's peak across fork and exec)."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024
    raise RuntimeError("no VmHWM in /proc/self/status (the benchmark needs Linux)")


def run_job(spec: dict, threads: int) -> dict:
    """Run a job in a fresh process.

    Returns its wall seconds, the CPU seconds of its stage (``cpu``) and of
    the whole process with start-up (``process_cpu``), and its peak memory
    (MB). CPU time is what a busy, shared machine disturbs least.
    """
    env = {**os.environ, "POLARS_MAX_THREADS": str(threads)}
    started = time.perf_counter()
    done = subprocess.run(
        [sys.executable, "-m", "bench.scale", "--job", json.dumps(spec)],
        cwd=REPO, env=env, capture_output=True, text=True,
    )
    wall = time.perf_counter() - started
    if done.returncode != 0:
        raise RuntimeError(f"benchmark job {spec['stage']} {spec.get('month')} failed:\n{done.stderr[-3000:]}")
    report = json.loads(done.stdout.strip().splitlines()[-1])
    return {"wall": wall, **report}


def run_market(trades: Path, n_months: int, work: Path, jobs: int, threads: int, span: int) -> dict:
    from liqpanel.core.partition import spans

    config = config_for(trades, n_months)
    config_path = work / "config.json"
    work.mkdir(parents=True, exist_ok=True)
    config_path.write_text(json.dumps(config))
    months = month_list(n_months)
    blocks = spans(months, span)

    def paths(ms: list[str]) -> dict[str, list[str]]:
        names = {"trades": "clean/trades", "audit": "clean/audit", "quotes": "clean/quotes", "bars": "bars/bars",
                 "daily": "daily/daily", "measures": "measures/monthly"}
        return {k: [str(work / v.split("/")[0] / f"month={m}" / f"{v.split('/')[1]}.parquet") for m in ms]
                for k, v in names.items()}

    def spec(stage: str, i: int) -> dict:
        block = blocks[i]
        s = {"stage": stage, "months": block, "paths": paths(block), "config": str(config_path)}
        first = months.index(block[0])
        if first:
            before = paths([months[first - 1]])
            s["previous_bars"], s["previous_daily"] = before["bars"][0], before["daily"][0]
        return s

    per_stage = {}
    started = time.perf_counter()
    with ThreadPoolExecutor(max_workers=jobs) as pool:
        for stage in STAGES:  # each stage's spans depend only on earlier stages
            per_stage[stage] = list(pool.map(lambda i: run_job(spec(stage, i), threads), range(len(blocks))))
    wall = time.perf_counter() - started
    monthly = pl.concat([pl.read_parquet(p) for p in paths(months)["measures"]]).sort("security", "month")
    return {
        "months": n_months,
        "trades": pl.scan_parquet(trades).select(pl.len()).collect().item(),
        "jobs": len(blocks) * len(STAGES),
        "wall": wall,
        "cpu": sum(r["process_cpu"] for runs in per_stage.values() for r in runs),
        "trades_cpu": sum(r["process_cpu"] for r in per_stage["trades"]),
        "mean_job": {s: sum(r["cpu"] for r in runs) / len(runs) for s, runs in per_stage.items()},
        "peak_mb": {s: max(r["peak_mb"] for r in runs) for s, runs in per_stage.items()},
        "monthly": monthly,
    }


def job_plan(years: int, span: int) -> tuple[int, int]:
    """(jobs planned, jobs at one per month and stage) for ``years`` of data, as the workflow plans them."""
    from liqpanel.core.partition import spans

    months = month_list(12 * years)
    whole = 7  # audit, monthly table, panel, models, factors, study, report
    return len(STAGES) * len(spans(months, span)) + whole, 4 * len(months) + whole


# ---------------------------------------------------------------- the naive baseline


def pandas_monthly(trades_path: str, months: list[str]):
    """The same Roll and Amihud measures the way a pandas script would compute them.

    The whole trade file in memory; the cleaning rules of ``liqpanel.clean``
    (missing field, non-positive price or size, outside 09:10-15:40 New York
    time, exact duplicate); daily OHLC bars; close-to-close returns; Roll
    (1984) from the autocovariance of daily log price changes and Amihud
    (2002) by a Python function per security-month; at least 15 days.
    """
    import pandas as pd

    trades = pd.read_parquet(trades_path, columns=["security", "ts", "price", "size"])
    local = trades["ts"].dt.tz_convert("America/New_York")
    trades["date"] = local.dt.date
    clock = local.dt.strftime("%H:%M:%S.%f")
    ok = trades[["security", "ts", "price", "size"]].notna().all(axis=1)
    ok &= (trades["price"] > 0) & (trades["size"] > 0)
    ok &= (clock >= "09:10:00.000000") & (clock <= "15:40:00.000000")
    trades["month"] = local.dt.strftime("%Y-%m")
    ok &= trades["month"].isin(months)
    kept = trades[ok]
    kept = kept[~kept.duplicated(subset=["security", "ts", "price", "size"], keep="first")]
    kept = kept.sort_values(["security", "ts"])
    kept = kept.assign(dollars=kept["price"] * kept["size"])
    daily = kept.groupby(["security", "month", "date"]).agg(
        open=("price", "first"), high=("price", "max"), low=("price", "min"), close=("price", "last"),
        volume=("size", "sum"), dollar_volume=("dollars", "sum"),
    ).reset_index()
    daily["ret"] = daily.groupby("security")["close"].pct_change(fill_method=None)

    def one_month(group) -> pd.Series:
        dp = np.log1p(group["ret"].dropna().to_numpy())
        n = len(dp)
        d = dp - dp.mean() if n else dp
        gamma1 = float(np.sum(d[1:] * d[:-1]) / n) if n else np.nan
        roll = 2 * np.sqrt(-gamma1) if n >= 15 and gamma1 < 0 else np.nan
        valid = group["ret"].notna() & (group["dollar_volume"] > 0)
        illiq = (group["ret"][valid].abs() / group["dollar_volume"][valid]).mean() * 1e6
        return pd.Series({"roll_spread": roll, "amihud": illiq if valid.sum() >= 15 else np.nan})

    out = daily.groupby(["security", "month"])[["ret", "dollar_volume"]].apply(one_month).reset_index()
    out["month"] = pd.to_datetime(out["month"] + "-01").dt.date
    return out


def run_pandas(trades: Path, n_months: int, work: Path, threads: int) -> dict:
    out = work / "pandas.parquet"
    spec = {"stage": "pandas", "trades": str(trades), "months": month_list(n_months), "out": str(out)}
    result = run_job(spec, threads)
    result["monthly"] = pl.read_parquet(out).with_columns(pl.col("month").cast(pl.Date)).sort("security", "month")
    return result


def largest_difference(ours: pl.DataFrame, theirs: pl.DataFrame, column: str) -> float:
    both = ours.select("security", "month", column).join(theirs.select("security", "month", column),
                                                        on=["security", "month"], suffix="_pd")
    a, b = both[column].to_numpy(), both[f"{column}_pd"].to_numpy()
    if not np.array_equal(np.isnan(a), np.isnan(b)):
        raise AssertionError(f"pandas and liqpanel disagree on which {column} values are missing")
    scale = np.nanmax(np.abs(a)) or 1.0
    return float(np.nanmax(np.abs(a - b)) / scale) if np.isfinite(a).any() else 0.0


# ---------------------------------------------------------------- report


def machine() -> str:
    cpu = next((line.split(":", 1)[1].strip() for line in Path("/proc/cpuinfo").read_text().splitlines()
                if line.startswith("model name")), platform.processor() or "unknown CPU")
    mem = next((int(line.split()[1]) / 2**20 for line in Path("/proc/meminfo").read_text().splitlines()
                if line.startswith("MemTotal")), float("nan"))
    import pandas as pd

    return (f"{cpu}, {os.cpu_count()} cores, {mem:.0f} GiB; Python {platform.python_version()}, "
            f"polars {pl.__version__}, pandas {pd.__version__}")


def table(results: dict[int, dict], baselines: dict[int, dict], args, start: dict) -> str:
    one = results[min(results)]
    largest_one = max(one["peak_mb"].values())
    lines = [
        "| market | months | jobs | trades | wall time (s) | CPU time (s) | CPU / 1x | trades per CPU second "
        "| clean + bars: trades per CPU second | CPU per job (s): clean + bars / daily / measures "
        "| peak memory per job (MB): clean + bars / daily / measures | largest job / 1x |",
        "|---|---:|---:|---:|---:|---:|---:|---:|---:|---|---|---:|",
    ]
    for k, r in sorted(results.items()):
        times = " / ".join(f"{r['mean_job'][s]:.2f}" for s in STAGES)
        peaks = " / ".join(f"{r['peak_mb'][s]:.0f}" for s in STAGES)
        lines.append(
            f"| {k}x | {r['months']} | {r['jobs']} | {r['trades']:,} | {r['wall']:.1f} | {r['cpu']:.1f} "
            f"| {r['cpu'] / one['cpu']:.2f} | {r['trades'] / r['cpu']:,.0f} | {r['trades'] / r['trades_cpu']:,.0f} "
            f"| {times} | {peaks} | {max(r['peak_mb'].values()) / largest_one:.2f} |"
        )
    first = baselines[min(baselines)]
    for k, b in sorted(baselines.items()):
        trades = results[k]["trades"]
        lines.append(
            f"| pandas, {k}x | {results[k]['months']} | 1 | {trades:,} | {b['wall']:.1f} | {b['process_cpu']:.1f} "
            f"| {b['process_cpu'] / first['process_cpu']:.2f} | {trades / b['process_cpu']:,.0f} | - "
            f"| {b['cpu']:.2f} (one script) | {b['peak_mb']:.0f} (one script) | {b['peak_mb'] / first['peak_mb']:.2f} |"
        )
    ratios = "; ".join(
        f"{k}x: {b['process_cpu'] / results[k]['trades_cpu']:.1f}x (whole chain {b['process_cpu'] / results[k]['cpu']:.1f}x)"
        for k, b in sorted(baselines.items())
    )
    plans = "; ".join(
        f"{y} years: {job_plan(y, args.span)[0]} jobs, {job_plan(y, args.span)[0] * start['process_cpu']:.0f} CPU-s "
        f"of start-up (one per month and stage: {job_plan(y, args.span)[1]} jobs, "
        f"{job_plan(y, args.span)[1] * start['process_cpu']:.0f} CPU-s)"
        for y in (2, 20)
    )
    b = first
    footer = [
        "",
        f"One process per stage and span of {args.span} months (as one workflow job), {args.jobs} at a time, "
        f"{args.threads} polars thread(s) each. CPU time adds up every job's process, start-up included; CPU per "
        "job is the stage alone, averaged over the spans; peak memory is the largest over the spans. "
        "x / 1x compares with the 1x market of the same program.",
        f"Trades per CPU second of clean + bars (start-up included) against the pandas script: {ratios}.",
        f"pandas at {min(baselines)}x: {b['peak_mb'] / largest_one:.2f}x the peak memory of liqpanel's largest job; "
        f"same results (largest relative difference: Roll {b['diff_roll']:.1e}, Amihud {b['diff_amihud']:.1e}).",
        f"Start-up of a clean + bars job process (Python, polars, its stage modules): {start['process_cpu']:.2f} CPU-s, "
        f"{start['peak_mb']:.0f} MB. Jobs planned: {plans}.",
        f"Trade files in {args.order} order. Machine: {machine()}.",
    ]
    return "\n".join(lines + footer)


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(prog="python -m bench.scale", description=__doc__.split("\n\n")[0])
    parser.add_argument("--sizes", default="1,4,16", help="market sizes, multiples of the base (default 1,4,16)")
    parser.add_argument("--pandas-sizes", default="1,4", help="sizes the pandas script runs at too (default 1,4)")
    parser.add_argument("--base-months", type=int, default=2, help="months of the 1x market (default 2)")
    parser.add_argument("--securities", type=int, default=100, help="securities in every market (default 100)")
    parser.add_argument("--jobs", type=int, default=2, help="jobs run at once (default 2)")
    parser.add_argument("--threads", type=int, default=1, help="polars threads per job (default 1)")
    parser.add_argument("--span", type=int, default=12, help="months per job, as run.span_months (default 12)")
    parser.add_argument("--order", choices=("time", "security"), default="time",
                        help="row order of the trade files (default time)")
    parser.add_argument("--seed", type=int, default=20240611)
    parser.add_argument("--job", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.job:
        job_main(json.loads(args.job))
        return
    sizes = sorted({int(s) for s in args.sizes.split(",")})
    pandas_sizes = sorted({int(s) for s in args.pandas_sizes.split(",")} & set(sizes)) or [min(sizes)]
    months = {k: k * args.base_months for k in sizes}
    with tempfile.TemporaryDirectory(prefix="liqpanel-bench-") as tmp:
        root = Path(tmp)
        t0 = time.perf_counter()
        files = make_markets(root, sorted(months.values()), args.securities, args.seed, args.order)
        print(f"simulated the markets in {time.perf_counter() - t0:.0f}s; running...", file=sys.stderr)
        results, baselines = {}, {}
        for k in sizes:
            results[k] = run_market(files[months[k]], months[k], root / f"x{k}" / "work", args.jobs, args.threads,
                                    args.span)
            print(f"  {k}x done in {results[k]['wall']:.1f}s", file=sys.stderr)
        for k in pandas_sizes:
            baselines[k] = b = run_pandas(files[months[k]], months[k], root / f"x{k}", args.threads)
            b["diff_roll"] = largest_difference(results[k]["monthly"], b["monthly"], "roll_spread")
            b["diff_amihud"] = largest_difference(results[k]["monthly"], b["monthly"], "amihud")
            print(f"  pandas {k}x done in {b['wall']:.1f}s", file=sys.stderr)
        start = min((run_job({"stage": "start"}, args.threads) for _ in range(3)), key=lambda r: r["process_cpu"])
    print(table(results, baselines, args, start))


if __name__ == "__main__":
    main()
