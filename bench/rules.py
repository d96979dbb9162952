"""Clean + bars with the demo's full rule set: this code against an earlier commit, side by side.

The demo market (``demo_data/``, 24 months, trades and quotes) goes through
clean and bars with every rule of ``config/config.yaml``: the quote rules,
the same-time merges, the outside-quotes rule, the Brownlees & Gallo
outlier filter, trade signing, the spread benchmarks and the realized
variance. The demo holds two markets, which an earlier commit may not know;
so that both programs clean the same input, both run by default on its
first market alone (``--input one-market``): that market's securities' trades
and quotes, and the demo's settings on one market (``one_market`` of
``tests/demo_config.py``). ``--input demo`` runs the demo as it is (for an
earlier commit that has several markets). Each program runs its jobs as its
workflow does:

- this code: one process per span of ``run.span_months`` months
  (``liqpanel.bars.job.run_bars``);
- the earlier commit (``--ref``, default the span jobs before they were
  made faster): one process per span as this code, its own ``src/``
  extracted with ``git archive`` into a scratch folder and put first on the
  path; with ``--month-jobs``, one process per month and stage (for a commit
  before the span jobs; the one-market input needs a commit whose config
  check knows today's config keys).

It reports the CPU time of all processes, start-up included, with one
polars thread each, and checks that both wrote the same tables (every clean
table, audit and bars partition). No assertion on time: the lines are the
result. Run: ``make bench-rules`` or ``python -m bench.rules --help``.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tarfile
import tempfile
from io import BytesIO
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
BASE_REF = "5527aae"  # the span jobs before they were made faster

JOB = r"""
import json, os, sys
from liqpanel.config import load_config
try:  # each stage's job module, called with the config sections it reads
    from liqpanel.bars.job import run_bars, run_bars_month
    from liqpanel.clean.job import run_clean
    from liqpanel.core.settings import for_job
    stages = None
except ImportError:  # a commit with every job in one module of jobs
    from liqpanel import stages
spec = json.loads(sys.argv[1])
try:  # as the workflow checks the config in a job's own process (liqpanel/workflow/rules/common.smk)
    from liqpanel.config import read_config, validate_config
    config = validate_config(read_config(spec["config"]), source=spec["config"], checked_before=True)
except (ImportError, TypeError):  # a commit that checks the config in full in every job
    config = load_config(spec["config"])
paths = {k: [os.path.join(spec["out"], f"{k}-{m}.parquet") for m in spec["months"]] for k in ("trades", "audit", "quotes", "bars")}
if len(spec["stages"]) == 2 and (stages is None or hasattr(stages, "trades_span")):  # a span job as the workflow runs it
    if stages is None:
        run_bars(spec["months"], paths, **for_job(config, run_bars))
    else:
        stages.trades_span(config, spec["months"], paths)
    spec["months"] = []
for month in spec["months"]:
    p = {k: os.path.join(spec["out"], f"{k}-{month}.parquet") for k in ("trades", "audit", "quotes", "bars")}
    if "clean" in spec["stages"]:
        if stages is None:
            run_clean(month, p["trades"], p["audit"], p["quotes"], **for_job(config, run_clean))
        else:
            stages.clean_month(config, month, p["trades"], p["audit"], p["quotes"])
    if "bars" in spec["stages"]:
        if stages is None:
            run_bars_month(p["trades"], p["bars"], p["quotes"], **for_job(config, run_bars_month))
        else:
            stages.bars_month(p["trades"], p["bars"], config, p["quotes"])
used = os.times()
print(used.user + used.system)
"""


def run(specs: list[dict], cwd: Path, path: str | None) -> float:
    """CPU seconds of all the processes, start-up included."""
    env = {**os.environ, "POLARS_MAX_THREADS": "1"}
    if path:
        env["PYTHONPATH"] = path
    total = 0.0
    for spec in specs:
        done = subprocess.run([sys.executable, "-c", JOB, json.dumps(spec)], cwd=cwd, env=env,
                              capture_output=True, text=True)
        if done.returncode:
            raise RuntimeError(f"job {spec['months'][0]} failed:\n{done.stderr[-3000:]}")
        total += float(done.stdout.strip().splitlines()[-1])
    return total


def extract(ref: str, into: Path) -> None:
    """``src/``, ``config/`` and ``workflow/`` (those the commit has) of commit ``ref``, and a link to the demo data."""
    top = subprocess.run(["git", "ls-tree", "--name-only", ref], cwd=REPO, capture_output=True, text=True,
                         check=True).stdout.split()
    folders = [f for f in ("src", "config", "workflow") if f in top]
    archive = subprocess.run(["git", "archive", ref, *folders], cwd=REPO, capture_output=True, check=True).stdout
    with tarfile.open(fileobj=BytesIO(archive)) as tar:
        tar.extractall(into, filter="data")
    (into / "demo_data").symlink_to(REPO / "demo_data")


def one_market_input(folder: Path) -> tuple[str, str]:
    """The demo's first market alone: its securities' trades and quotes, and a config of the demo's
    settings on that market (``tests/demo_config.py``), written under ``folder``; (config path, market code)."""
    import polars as pl
    import yaml

    sys.path.insert(0, str(REPO / "tests"))
    from demo_config import one_market

    raw = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    code, profile = next(iter(raw["markets"]["profiles"].items()))
    config = one_market(raw, profile)
    codes = pl.read_parquet(REPO / raw["inputs"]["securities"]).filter(pl.col(raw["markets"]["column"]) == code)
    folder.mkdir()
    for key in ("trades", "quotes"):
        path = folder / f"{key}.parquet"
        pl.read_parquet(REPO / raw["inputs"][key]).join(codes.select("security"), on="security", how="semi",
                                                          maintain_order="left").write_parquet(path)
        config["inputs"][key] = str(path)
    (folder / "config.yaml").write_text(yaml.safe_dump(config, sort_keys=False))
    return str(folder / "config.yaml"), code


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(prog="python -m bench.rules", description=__doc__.split("\n\n")[0])
    parser.add_argument("--ref", default=BASE_REF, help=f"the earlier commit (default {BASE_REF})")
    parser.add_argument("--month-jobs", action="store_true",
                        help="run the earlier commit one process per month and stage (a commit before span jobs)")
    parser.add_argument("--input", choices=("one-market", "demo"), default="one-market",
                        help="the demo's first market alone (default), or the demo as it is")
    args = parser.parse_args(argv)
    sys.path.insert(0, str(REPO / "src"))
    import polars as pl

    from liqpanel.config import load_config
    from liqpanel.core.io import month_range
    from liqpanel.core.partition import spans

    with tempfile.TemporaryDirectory(prefix="liqpanel-bench-rules-") as tmp:
        root = Path(tmp)
        config_path = str(REPO / "config" / "config.yaml")
        if args.input == "one-market":
            config_path, market = one_market_input(root / "input")
        config = load_config(config_path)
        months = month_range(config["sample"]["start"], config["sample"]["end"])
        extract(args.ref, root / "base")
        ours, theirs = root / "ours", root / "base-out"
        ours.mkdir()
        theirs.mkdir()
        span_specs = [{"months": block, "stages": ["clean", "bars"], "out": str(ours), "config": config_path}
                      for block in spans(months, config["run"]["span_months"])]
        month_specs = [{"months": [m], "stages": [stage], "out": str(theirs), "config": config_path}
                       for stage in ("clean", "bars") for m in months]
        if not args.month_jobs:
            month_specs = [{**s, "out": str(theirs)} for s in span_specs]
        cpu_ours = run(span_specs, REPO, None)
        cpu_base = run(month_specs, root / "base", str(root / "base" / "src"))
        from polars.testing import assert_frame_equal

        files = sorted(p.name for p in theirs.glob("*.parquet"))
        for name in files:
            assert_frame_equal(pl.read_parquet(ours / name), pl.read_parquet(theirs / name))
        trades = pl.scan_parquet(config["inputs"]["trades"]).select(pl.len()).collect().item()
    what = f"the demo's first market ({market}) alone" if args.input == "one-market" else "the demo"
    print(f"{what}, full rule set, {len(months)} months, {trades:,} trades read; one polars thread per process")
    print(f"  this code       {len(span_specs):3d} processes (a span of months each)  {cpu_ours:6.2f} CPU-s")
    each = "a month and stage each" if args.month_jobs else "a span of months each"
    print(f"  commit {args.ref}  {len(month_specs):3d} processes ({each})  {cpu_base:6.2f} CPU-s")
    print(f"  {cpu_base / cpu_ours:.1f}x less CPU; the same {len(files)} tables (clean trades, quotes, audit, bars)")


if __name__ == "__main__":
    main()
