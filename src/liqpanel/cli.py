"""The ``liqpanel`` command line.

    liqpanel simulate --securities 40 --months 24 --seed 20240101 --out demo_data
    liqpanel measures                 # list the registered measures and sources
    liqpanel check-config FILE        # validate a config without running
    liqpanel run [--config FILE] [--cores N] [snakemake args...]
    liqpanel study [--config FILE] [--cores N] [snakemake args...]   # the estimator study alone
    liqpanel check-tables REFERENCE CANDIDATE   # compare two runs' tables cell by cell
    liqpanel check-versions RUN_FOLDER          # installed package versions against a run's manifest

Also ``python -m liqpanel``. The workflow, its schema and the market profiles
are package data (``liqpanel/workflow/``, ``liqpanel/market_profiles/``), so
an installed wheel runs without the source tree.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
from pathlib import Path

import liqpanel
from liqpanel.config import SNAKEFILE
from liqpanel.errors import LiqpanelError


def _simulate(args: argparse.Namespace) -> int:
    from liqpanel.simulate import SimulationSpec, simulate_market, write_market

    spec = SimulationSpec(
        n_securities=args.securities, n_months=args.months, seed=args.seed, start=args.start,
        bad_row_share=args.bad_row_share,
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
        sys.executable, "-m", "snakemake", "--snakefile", str(SNAKEFILE),
        "--configfile", str(args.config), "--cores", str(args.cores), "--force-use-threads", "--rerun-incomplete", *extra, "--", target,
    ]
    if args.verbose or any(a in ("-n", "--dry-run", "--dryrun") for a in extra):
        return subprocess.call(cmd)
    from liqpanel.progress import follow

    with subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, bufsize=1) as proc:
        assert proc.stdout is not None
        follow(proc.stdout, sys.stdout, sys.stderr)
        return proc.wait()


def _check_tables(args: argparse.Namespace) -> int:
    from liqpanel.compare import Tolerance, check_tables, summary_text, write_check_report

    result = check_tables(args.reference, args.candidate, Tolerance(args.abs_tol, args.rel_tol), strict=args.strict)
    sys.stdout.write(summary_text(result, top=args.top))
    if args.report:
        print(f"report: {write_check_report(result, args.report)}")
    return 0 if result.passed else 1


def _check_versions(args: argparse.Namespace) -> int:
    from liqpanel.environment import compare_versions, installed_versions, manifest_versions, versions_text

    differences = compare_versions(manifest_versions(args.run_folder), installed_versions())
    sys.stdout.write(versions_text(differences, args.run_folder, show_all=args.all))
    return 1 if any(d.differs for d in differences) else 0


def _run(args: argparse.Namespace, extra: list[str]) -> int:
    from liqpanel.config import load_config

    config = load_config(args.config)  # fail fast with a clear message
    code = _snakemake(args, extra, "all")
    if code == 0 and not any(a in ("-n", "--dry-run", "--dryrun") for a in extra):
        from liqpanel.report import run_id

        print(f"results: {Path(config['run']['results_dir']) / run_id(config)}")
    return code


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


def _workflow_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--config", default="config/config.yaml", help="the run's YAML config (default config/config.yaml)")
    p.add_argument("--cores", type=int, default=2, help="CPU cores the workflow may use (default 2)")
    p.add_argument("-v", "--verbose", action="store_true",
                   help="print the workflow engine's full output (every job) instead of one line per stage")


def parser() -> argparse.ArgumentParser:
    top = argparse.ArgumentParser(prog="liqpanel", description="Cross-sectional liquidity panels, reproducibly.")
    top.add_argument("--version", action="version", version=f"liqpanel {liqpanel.__version__}")
    sub = top.add_subparsers(dest="command", required=True, metavar="COMMAND")

    p = sub.add_parser("simulate", help="write an invented market (trades, quotes, characteristics, truth)")
    p.add_argument("--securities", type=int, default=40, help="number of invented securities (default 40)")
    p.add_argument("--months", type=int, default=24, help="number of months (default 24)")
    p.add_argument("--seed", type=int, default=20240101, help="random seed; the same seed gives the same files")
    p.add_argument("--start", default="2021-01", help="first month, YYYY-MM (default 2021-01)")
    p.add_argument("--bad-row-share", type=float, default=0.002,
                   help="share of planted bad rows for the cleaning audit (default 0.002)")
    p.add_argument("--out", required=True, help="folder to write the market's files into")

    p = sub.add_parser("measures", help="list the registered measures with their sources")
    p.add_argument("-v", "--verbose", action="store_true", help="also list outputs, needed columns and options")

    p = sub.add_parser("check-config", help="validate a config file")
    p.add_argument("config", help="the YAML config to validate")

    p = sub.add_parser("run", help="run the whole workflow (extra options go to snakemake)")
    _workflow_options(p)

    p = sub.add_parser("study", help="which estimator is closest to the truth in conditions like your market's "
                                     "(a simulation study calibrated to your data; extra options go to snakemake)")
    _workflow_options(p)

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
    p.add_argument("--report", default=None, metavar="FILE",
                   help="also write the comparison as JSON to FILE (default: none)")

    p = sub.add_parser(
        "check-versions",
        help="compare the installed package versions with those a run recorded in its manifest",
        description="Before rerunning a run's tables, list every package whose installed version differs from the "
        "version recorded in RUN_FOLDER/manifest.json (Python included). Exit status 0: all the same; 1: some differ.",
    )
    p.add_argument("run_folder", help="a run folder (results/<run-id>) or its manifest.json")
    p.add_argument("--all", action="store_true", help="list every recorded package, not only those that differ")
    return top


def main(argv: list[str] | None = None) -> int:
    """The command line; a closed output pipe (``liqpanel measures | head``) ends it quietly."""
    try:
        return _main(argv)
    except BrokenPipeError:
        # Python's advice: point stdout at devnull so the interpreter's final flush does not fail again
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 1


def _main(argv: list[str] | None) -> int:
    top = parser()
    args, extra = top.parse_known_args(argv)
    if extra and args.command not in ("run", "study"):
        top.error(f"unrecognised arguments: {' '.join(extra)}")
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
        if args.command == "check-versions":
            return _check_versions(args)
        return _run(args, extra)
    except LiqpanelError as exc:
        print(f"liqpanel: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
