"""The ``liqpanel`` command line.

    liqpanel simulate --securities 40 --months 24 --seed 20240101 --out demo_data
    liqpanel measures                 # list the registered measures and sources
    liqpanel check-config FILE        # validate a config without running
    liqpanel run [--config FILE] [--cores N] [snakemake args...]
    liqpanel study [--config FILE] [--cores N] [snakemake args...]   # the estimator study alone
    liqpanel check-tables REFERENCE CANDIDATE   # compare two runs' tables cell by cell
"""

from __future__ import annotations

import argparse
import subprocess
import sys
from pathlib import Path

from liqpanel.errors import LiqpanelError

REPO_ROOT = Path(__file__).resolve().parents[2]


def _simulate(args: argparse.Namespace) -> int:
    from liqpanel.simulate import SimulationSpec, simulate_market, write_market

    spec = SimulationSpec(
        n_securities=args.securities, n_months=args.months, seed=args.seed, start=args.start,
        bad_row_share=args.bad_row_share, liquidity_shock_sd=args.liquidity_shock_sd,
        liquidity_beta_mean=args.liquidity_beta_mean, liquidity_beta_sd=args.liquidity_beta_sd,
    )
    paths = write_market(simulate_market(spec), args.out)
    for name, path in sorted(paths.items()):
        print(f"{name:16s} {path}")
    return 0


def _measures(args: argparse.Namespace) -> int:
    from liqpanel.measures import REGISTRY

    width = max(len(n) for n in REGISTRY)
    for name in sorted(REGISTRY, key=lambda n: (REGISTRY[n].family, n)):
        m = REGISTRY[name]
        print(f"{name:<{width}}  {m.family:<10} min {m.min_days:>2} days  {m.source}")
        if args.verbose:
            print(f"{'':<{width}}  outputs: {', '.join(m.outputs)}; needs: {', '.join(m.columns)}")
            if m.options:
                print(f"{'':<{width}}  options: {m.options}")
            if m.description:
                print(f"{'':<{width}}  {m.description}")
    return 0


def _check_config(args: argparse.Namespace) -> int:
    from liqpanel.config import load_config

    load_config(args.config)
    print(f"{args.config}: valid")
    return 0


def _snakemake(args: argparse.Namespace, extra: list[str], target: str) -> int:
    cmd = [
        sys.executable, "-m", "snakemake", "--snakefile", str(REPO_ROOT / "Snakefile"),
        "--configfile", str(args.config), "--cores", str(args.cores), "--force-use-threads", "--rerun-incomplete", *extra, "--", target,
    ]
    return subprocess.call(cmd)


def _check_tables(args: argparse.Namespace) -> int:
    from liqpanel.compare import Tolerance, check_tables, summary_text, write_check_report

    result = check_tables(args.reference, args.candidate, Tolerance(args.abs_tol, args.rel_tol), strict=args.strict)
    sys.stdout.write(summary_text(result, top=args.top))
    if args.report:
        print(f"report: {write_check_report(result, args.report)}")
    return 0 if result.passed else 1


def _run(args: argparse.Namespace, extra: list[str]) -> int:
    from liqpanel.config import load_config

    load_config(args.config)  # fail fast with a clear message
    return _snakemake(args, extra, "all")


def _study(args: argparse.Namespace, extra: list[str]) -> int:
    from liqpanel.config import load_config
    from liqpanel.report import run_id

    config = load_config(args.config)
    code = _snakemake(args, extra, "study_results")
    if code == 0:
        folder = Path(config["run"]["results_dir"]) / f"study-{run_id(config)}"
        print(f"study results: {folder}")
        summary = folder / "study_summary.md"
        if summary.exists():
            print(summary.read_text(), end="")
    return code


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="liqpanel", description="Cross-sectional liquidity panels, reproducibly.")
    sub = parser.add_subparsers(dest="command", required=True)

    p = sub.add_parser("simulate", help="write an invented market (trades, quotes, characteristics, truth)")
    p.add_argument("--securities", type=int, default=40)
    p.add_argument("--months", type=int, default=24)
    p.add_argument("--seed", type=int, default=20240101)
    p.add_argument("--start", default="2021-01", help="first month, YYYY-MM")
    p.add_argument("--bad-row-share", type=float, default=0.002, help="share of planted bad rows for the cleaning audit")
    p.add_argument("--liquidity-shock-sd", type=float, default=0.25,
                   help="monthly shock sd of the common factor in log half-spreads (0: none)")
    p.add_argument("--liquidity-beta-mean", type=float, default=0.1,
                   help="mean return loading on the planted liquidity innovation")
    p.add_argument("--liquidity-beta-sd", type=float, default=0.3,
                   help="cross-sectional sd of that loading")
    p.add_argument("--out", required=True)

    p = sub.add_parser("measures", help="list the registered measures with their sources")
    p.add_argument("-v", "--verbose", action="store_true")

    p = sub.add_parser("check-config", help="validate a config file")
    p.add_argument("config")

    p = sub.add_parser("run", help="run the whole workflow (extra options go to snakemake)")
    p.add_argument("--config", default="config/config.yaml")
    p.add_argument("--cores", type=int, default=2)

    p = sub.add_parser("study", help="which estimator is closest to the truth in conditions like your market's "
                                     "(a simulation study calibrated to your data; extra options go to snakemake)")
    p.add_argument("--config", default="config/config.yaml")
    p.add_argument("--cores", type=int, default=2)

    p = sub.add_parser(
        "check-tables",
        help="compare every table of two runs (or a run and a folder of archived tables) within a tolerance",
        description="Compare every CSV table of CANDIDATE with REFERENCE cell by cell. Each is a run folder "
        "(results/<run-id>) or a folder of CSV tables (e.g. tests/expected). Exit status 0: all tables agree "
        "within tolerance; 1: a table differs or is missing; 2: bad arguments or unreadable tables.",
    )
    p.add_argument("reference", help="the archived run folder or folder of tables")
    p.add_argument("candidate", help="the run folder or folder of tables to check")
    p.add_argument("--abs-tol", type=float, default=1e-9, help="absolute tolerance (default 1e-9)")
    p.add_argument("--rel-tol", type=float, default=1e-6, help="tolerance relative to |reference| (default 1e-6)")
    p.add_argument("--strict", action="store_true", help="also fail when the candidate has tables the reference lacks")
    p.add_argument("--top", type=int, default=10, help="largest deviations to print (default 10)")
    p.add_argument("--report", default="table-check.json", help="where to write the JSON report ('' for none)")

    args, extra = parser.parse_known_args(argv)
    if extra and args.command not in ("run", "study"):
        parser.error(f"unrecognised arguments: {' '.join(extra)}")
    try:
        if args.command == "simulate":
            return _simulate(args)
        if args.command == "measures":
            return _measures(args)
        if args.command == "check-config":
            return _check_config(args)
        if args.command == "study":
            return _study(args, extra)
        if args.command == "check-tables":
            return _check_tables(args)
        return _run(args, extra)
    except LiqpanelError as exc:
        print(f"liqpanel: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
