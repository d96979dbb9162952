"""The ``liqpanel`` command line.

    liqpanel simulate --securities 40 --months 24 --seed 20240101 --out demo_data
    liqpanel measures                 # list the registered measures and sources
    liqpanel check-config FILE        # check a config and its inputs without running
    liqpanel daily-starter DAILY_FILE --out my.yaml   # a starter config for a daily stock file
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
import re
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import liqpanel
from liqpanel.config import SNAKEFILE
from liqpanel.core.errors import LiqpanelError


def _simulate(args: argparse.Namespace) -> int:
    from liqpanel.simulate import SimulationSpec, simulate_market, write_market

    spec = SimulationSpec(
        n_securities=args.securities, n_months=args.months, seed=args.seed, start=args.start,
        bad_row_share=args.bad_row_share, liquidity_shock_sd=args.liquidity_shock_sd,
        liquidity_beta_mean=args.liquidity_beta_mean, liquidity_beta_sd=args.liquidity_beta_sd,
        second_securities=args.second_market_securities, second_profile=args.second_market_profile,
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


def _preflight(path: str, target: str = "all") -> dict:
    """Check the config and its inputs; print every problem and stop (exit 2) when there is one."""
    from liqpanel.config import read_config
    from liqpanel.preflight import errors, preflight, report_lines

    raw = read_config(path)
    problems = preflight(raw, source=str(path), target=target)
    for line in report_lines(problems):
        print(line, file=sys.stderr)
    if errors(problems):
        raise SystemExit(2)
    return raw


def _check_config(args: argparse.Namespace) -> int:
    _preflight(args.config)
    print(f"{args.config}: valid")
    return 0


def _daily_starter(args: argparse.Namespace) -> int:
    from liqpanel.cli.starter import write_daily_starter

    out = write_daily_starter(args.daily, args.out, separator=args.separator, force=args.force)
    print(f"{out}: written; map your columns under columns.daily, then run  liqpanel check-config {out}")
    return 0


class _JobErrors:
    """Leaves the engine frames out of a user's error raised inside a job.

    Snakemake prints an exception raised in a job as its class, the rule
    file, the message and the Python frames. For our own errors (a bad
    input, a bad setting) the frames say nothing to a user: they are left
    out and the message is kept, to be repeated last as ``liqpanel: ...``.
    """

    HEAD = re.compile(r'^(\w+) in file ".*", line \d+:$')
    FRAME = re.compile(r'^\s+File ".*", line \d+')
    OURS = ("InputError", "ConfigError", "LiqpanelError")

    def __init__(self) -> None:
        self.ours, self.reading, self.message = False, False, []

    def keep(self, line: str) -> bool:
        """Whether to show ``line``; remembers the message of our own error."""
        if line.startswith("RuleException:"):
            return False
        head = self.HEAD.match(line.rstrip("\n"))
        if head:
            self.ours, self.reading = head.group(1) in self.OURS, True
            return not self.ours
        if self.FRAME.match(line):
            self.reading = False
            return not self.ours
        if self.reading:
            self.message.append(line.rstrip("\n"))
            return not self.ours
        return True


STOPPED = "liqpanel: stopped; run the same command again to resume"


def _snakemake(args: argparse.Namespace, extra: list[str], target: str, checked: dict) -> int:
    from liqpanel.core.runtime import CHECKED_ENV, config_digest

    cmd = [
        sys.executable, "-m", "snakemake", "--snakefile", str(SNAKEFILE),
        "--configfile", str(args.config), "--cores", str(args.cores), "--force-use-threads", "--rerun-incomplete", *extra, "--", target,
    ]
    env = {**os.environ, CHECKED_ENV: config_digest(checked)}  # the workflow need not check the same config again
    # quiet (the default): one line per stage from the engine's output (liqpanel.cli.progress); verbose: all of it
    quiet = not (args.verbose or any(a in ("-n", "--dry-run", "--dryrun") for a in extra))
    # Ctrl-C in a terminal reaches Snakemake too (one process group), which then stops its jobs and releases
    # its lock; what it prints while it stops (its jobs' tracebacks included) is not shown
    child = subprocess.Popen(cmd, env=env, stdout=subprocess.PIPE if quiet else None,
                             stderr=subprocess.STDOUT if quiet else subprocess.PIPE)
    muted, errors = threading.Event(), _JobErrors()
    stream = child.stdout if quiet else child.stderr
    relay = threading.Thread(target=_relay, args=(stream, muted, errors, quiet), daemon=True)
    relay.start()
    try:
        code = _wait(child)
    except KeyboardInterrupt:
        muted.set()
        _stop(child)
        relay.join(timeout=5)
        raise
    relay.join()
    if code != 0 and errors.ours and errors.message:
        print("liqpanel: " + "\n".join(errors.message), file=sys.stderr)
        return 2
    return code


def _stop(child: subprocess.Popen, grace: float = 3.0) -> None:
    """Wait for Snakemake to stop after Ctrl-C; pass the interrupt on if it was sent to this process alone."""
    deadline = time.monotonic() + grace
    forwarded = False
    while child.poll() is None:
        try:
            if not forwarded and time.monotonic() > deadline:
                child.send_signal(signal.SIGINT)
                forwarded = True
            child.wait(timeout=0.2)
        except subprocess.TimeoutExpired:
            continue
        except KeyboardInterrupt:
            continue  # a second Ctrl-C: Snakemake is already stopping


def _wait(child: subprocess.Popen) -> int:
    """Wait for ``child`` in short steps: Ctrl-C may reach another of our threads (the table engine's),
    and only a waiting that wakes up lets the main thread see it."""
    while True:
        try:
            return child.wait(timeout=0.2)
        except subprocess.TimeoutExpired:
            continue


def _relay(stream, muted: threading.Event, errors: _JobErrors, quiet: bool) -> None:
    """Pass Snakemake's messages on line by line as they come, until muted: through the progress
    lines when ``quiet``, else all of them to our standard error."""
    signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT})  # Ctrl-C interrupts the main thread's wait
    lines = (raw.decode(errors="replace") for raw in iter(stream.readline, b""))
    shown = (line for line in lines if not muted.is_set() and errors.keep(line))
    if quiet:
        from liqpanel.cli.progress import follow

        follow(shown, _Unless(muted, sys.stdout), _Unless(muted, sys.stderr), explained=lambda: errors.ours)
        return
    for line in shown:
        sys.stderr.write(line)
        sys.stderr.flush()


class _Unless:
    """A stream that writes nothing once ``muted`` is set (after Ctrl-C)."""

    def __init__(self, muted: threading.Event, stream) -> None:
        self.muted, self.stream = muted, stream

    def write(self, text: str) -> None:
        if not self.muted.is_set():
            self.stream.write(text)

    def flush(self) -> None:
        self.stream.flush()


def _check_tables(args: argparse.Namespace) -> int:
    from liqpanel.report.compare import Tolerance, check_tables, summary_text, write_check_report

    result = check_tables(args.reference, args.candidate, Tolerance(args.abs_tol, args.rel_tol), strict=args.strict)
    sys.stdout.write(summary_text(result, top=args.top))
    if args.report:
        print(f"report: {write_check_report(result, args.report)}")
    return 0 if result.passed else 1


def _check_versions(args: argparse.Namespace) -> int:
    from liqpanel.cli.environment import compare_versions, installed_versions, manifest_versions, versions_text

    differences = compare_versions(manifest_versions(args.run_folder), installed_versions())
    sys.stdout.write(versions_text(differences, args.run_folder, show_all=args.all))
    return 1 if any(d.differs for d in differences) else 0


def _run(args: argparse.Namespace, extra: list[str]) -> int:
    from liqpanel.config import load_config

    raw = _preflight(args.config)  # every problem at once, before any work
    config = load_config(args.config)
    code = _snakemake(args, extra, "all", raw)
    if code == 0 and not any(a in ("-n", "--dry-run", "--dryrun") for a in extra):
        from liqpanel.report import run_id

        print(f"results: {Path(config['run']['results_dir']) / run_id(config)}")
    return code


def _study(args: argparse.Namespace, extra: list[str]) -> int:
    from liqpanel.config import load_config
    from liqpanel.report import run_id

    raw = _preflight(args.config, target="study")
    config = load_config(args.config)
    code = _snakemake(args, extra, "study_results", raw)
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
    p.add_argument("--liquidity-shock-sd", type=float, default=0.25,
                   help="monthly shock sd of the common factor in log half-spreads (0: none)")
    p.add_argument("--liquidity-beta-mean", type=float, default=0.1,
                   help="mean return loading on the planted liquidity innovation")
    p.add_argument("--liquidity-beta-sd", type=float, default=0.3,
                   help="cross-sectional sd of that loading")
    p.add_argument("--second-market-securities", type=int, default=0, metavar="N",
                   help="add a second market of N securities on its own clock, holidays, tick and currency, "
                        "with fx.parquet and a market column in securities (default 0: one market)")
    p.add_argument("--second-market-profile", default="gullwing", metavar="PROFILE",
                   help="market profile (shipped name or path) the second market trades on (default gullwing)")
    p.add_argument("--out", required=True, help="folder to write the market's files into")

    p = sub.add_parser("measures", help="list the registered measures with their sources")
    p.add_argument("-v", "--verbose", action="store_true", help="also list outputs, needed columns and options")

    p = sub.add_parser("check-config", help="check a config and its inputs, listing every problem (exit 2 if any)")
    p.add_argument("config", help="the YAML config to check")

    p = sub.add_parser(
        "daily-starter", help="write a starter config for a daily stock file (its columns listed for mapping)",
        description="Write a config holding only the sections that apply to a daily file: every column of the "
        "file is listed, commented, under columns.daily with a suggested column of ours. Only the file's header "
        "and its dates are read.",
    )
    p.add_argument("daily", help="the daily file (CSV, .csv.gz or Parquet)")
    p.add_argument("--out", required=True, help="the config file to write")
    p.add_argument("--separator", default=",", help="the CSV field separator (default ',')")
    p.add_argument("--force", action="store_true", help="replace --out when it exists")

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
        if args.command == "daily-starter":
            return _daily_starter(args)
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
    except SystemExit as exc:
        return exc.code if isinstance(exc.code, int) else 2
    except KeyboardInterrupt:
        print(STOPPED, file=sys.stderr)
        return 130


