"""A daily file through the whole workflow: ``liqpanel run`` from the file to the run folder.

Two invented markets of weekdays (a random walk written as a vendor CSV with
YYYYMMDD integer dates, as ``bench.daily_file`` writes it): by default 20
years of one security and 20 years of 5,000 securities. Each goes through
``liqpanel run --config <bench config>`` exactly as a user runs it
(Snakemake plans the jobs: the daily file read, checked and audited once,
one measures job for the whole sample, the monthly table, panel, models,
factors and report), in a fresh work and results folder, with Roll and
Amihud selected and one Fama-MacBeth regression of next month's return on
them.

For each market it prints the rows, the wall time of the whole command, the
CPU time of the command and every process it started (user + system of the
finished children) and the largest peak resident memory among them.
Nothing is committed: the files are written to a temporary folder and
removed.

Run: ``python -m bench.daily_run --help`` (``make bench-daily-run``). No
assertion is made on time: the table is the result.
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import yaml

from bench.daily_file import MAPPING, make_file
from bench.scale import machine

REPO = Path(__file__).resolve().parents[1]


def config_text(daily: Path, folder: Path, securities: int, years: int) -> str:
    config = {
        "run": {"name": "bench-daily", "results_dir": str(folder / "results"), "work_dir": str(folder / "work")},
        "sample": {"start": "2001-01", "end": f"{2000 + years}-12"},
        "market": "demo",
        "inputs": {"daily": str(daily)},
        "columns": {"daily": MAPPING},
        "measures": {"roll_spread": {"convention": "missing"}, "amihud": {}},
    }
    if securities >= 3:  # Fama-MacBeth needs a cross-section
        config["models"] = {"regressions": [{"name": "liquidity", "regressors": ["roll_spread", "amihud"],
                                             "estimator": "fama_macbeth", "lags": 4}]}
    return yaml.safe_dump(config, sort_keys=False)


def children_cpu() -> float:
    used = resource.getrusage(resource.RUSAGE_CHILDREN)
    return used.ru_utime + used.ru_stime


def run_once(securities: int, years: int, seed: int, cores: int, root: Path) -> dict:
    folder = root / f"s{securities}y{years}"
    folder.mkdir()
    daily = folder / "daily.csv"
    rows = make_file(daily, securities, years, seed)
    config = folder / "config.yaml"
    config.write_text(config_text(daily, folder, securities, years))
    cpu0, started = children_cpu(), time.perf_counter()
    done = subprocess.run([sys.executable, "-m", "liqpanel", "run", "--config", str(config), "--cores", str(cores)],
                          cwd=REPO, capture_output=True, text=True)
    wall, cpu = time.perf_counter() - started, children_cpu() - cpu0
    if done.returncode != 0:
        raise RuntimeError(f"liqpanel run failed on {securities} securities x {years} years:\n"
                           f"{done.stdout[-2000:]}\n{done.stderr[-3000:]}")
    return {"securities": securities, "years": years, "rows": rows, "mb": daily.stat().st_size / 1e6,
            "wall": wall, "cpu": cpu, "peak_mb": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024}


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(prog="python -m bench.daily_run", description=__doc__.split("\n\n")[0])
    parser.add_argument("--markets", default="1x20,5000x20",
                        help="securities x years of each market, comma-separated (default 1x20,5000x20)")
    parser.add_argument("--cores", type=int, default=2, help="cores given to liqpanel run (default 2)")
    parser.add_argument("--seed", type=int, default=20240101)
    args = parser.parse_args(argv)
    markets = [tuple(int(v) for v in m.split("x")) for m in args.markets.split(",")]
    results = []
    with tempfile.TemporaryDirectory(prefix="liqpanel-bench-daily-") as tmp:
        for securities, years in markets:
            results.append(r := run_once(securities, years, args.seed, args.cores, Path(tmp)))
            print(f"  {securities} x {years} years done in {r['wall']:.1f}s", file=sys.stderr)
    print("| securities | years | rows | CSV (MB) | wall time (s) | CPU time (s) | peak memory (MB) |")
    print("|---:|---:|---:|---:|---:|---:|---:|")
    for r in results:
        print(f"| {r['securities']:,} | {r['years']} | {r['rows']:,} | {r['mb']:.0f} | {r['wall']:.1f} | {r['cpu']:.1f} | {r['peak_mb']:,.0f} |")
    print(f"\n`liqpanel run --cores {args.cores}` from the CSV to the run folder (daily file read once, measures, "
          "monthly table, panel, Fama-MacBeth regression, factors, report); CPU time of every process it started; "
          "peak memory: the largest resident size of any of them so far (it only grows from one market to the next). "
          f"Machine: {machine()}; load average {os.getloadavg()[0]:.1f} at the end.")


if __name__ == "__main__":
    main()
