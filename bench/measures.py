"""Speed and memory of the measures stage against two pandas baselines and a one-pass floor.

    python -m bench.measures [--securities 5000] [--years 5] [--baseline-fraction 0.02]

Writes a synthetic daily panel (``bench.measures_data``) to Parquet, then for
every family of daily measures in the registry (and for all of them together)
times, each in a fresh process so that peak memory is the run's own (ours,
the vectorised baseline and the floor: the fastest of ``--repeat`` runs):

- ours: ``liqpanel.measures.compute_monthly`` on a scan of the Parquet file,
  the measures stage as the workflow runs it (one sort check, one pass over
  the rows computing every measure's per-day quantities, one sum per
  quantity and security-month; ``liqpanel.measures.plan``);
- the naive baseline: pandas ``groupby(...).apply`` of one plain function per
  measure and security-month (``bench.measures_naive``), on the securities
  of a random ``--baseline-fraction`` of the panel, its time scaled by rows
  to the whole panel;
- the vectorised baseline: the same measures as a researcher fluent in
  pandas writes them, whole-column arithmetic with ``groupby(...).shift``,
  ``agg`` and ``transform`` and no ``apply`` (``bench.measures_vectorised``),
  on the whole panel (all daily measures: one script computing them all);
- the floor: one scan of the same Parquet file aggregating each column the
  family reads once (a sum per security-month), the least any measure stage
  must do.

The LOT fits (both forms) are timed apart too, on ``--lot-fraction`` of the
securities (all of them by default), against scipy's optimiser run one
security-month at a time on ``--lot-months`` months, and their share of the
stage (all daily measures and both fits) is printed.

The Gibbs sampler is timed apart, per security-month at ``--sweeps`` sweeps:
ours on ``--gibbs-fraction`` of the securities, the baseline as a loop that
runs the same sampler one security-month at a time on ``--gibbs-months``
months; the two run in turn ``--repeat`` times and the fastest of each is
kept, so both see the machine's load alike.

Last, each daily measure's own cost: its plan alone in the single pass and
its vectorised-baseline function alone, on tables read and prepared once. The table prints seconds, the ratio of each baseline to ours side by
side, ours / floor and
our peak resident memory; the lines below it compare the results with the
targets. Timings are wall-clock on whatever else the machine is doing: run it
on a quiet machine.
"""

from __future__ import annotations

import argparse
import multiprocessing
import os
import platform
import resource
import shutil
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

TARGET_RATIO = 50.0  # all daily measures together against the naive baseline
TARGET_VECTORISED_RATIO = 10.0  # all daily measures together against the vectorised pandas baseline
TARGET_FLOOR = 3.0  # ours over the one-pass floor
TARGET_MEMORY_GB = 4.0  # peak resident memory at the default size
TARGET_GIBBS_RATIO = 100.0  # vectorised sampler against the per-month loop
LOT = ("lot_mixed", "lot_ysplit")  # likelihood fits, timed apart like the sampler
GIB = 1024.0**3


def _families() -> dict[str, list[str]]:
    """Registered measures computable from daily bars alone, by family.

    Measures that need intraday columns (the high-frequency benchmarks) and
    the Gibbs sampler and the LOT fits (timed apart) and the blend (its components are timed) are left out.
    """
    from liqpanel.core.contracts import DAILY
    from liqpanel.measures import REGISTRY

    daily_columns = set(DAILY) | {"shares_out", "mkt_ret"}
    families: dict[str, list[str]] = {}
    for name, measure in REGISTRY.items():
        if name not in ("gibbs_spread", "spread_blend") and name not in LOT and set(measure.columns) <= daily_columns:
            families.setdefault(measure.family, []).append(name)
    return families


def _columns_read(names: list[str]) -> list[str]:
    from liqpanel.measures import REGISTRY

    needed = {c for n in names for c in REGISTRY[n].columns}
    needed = {"ret" if c == "mkt_ret" else c for c in needed}  # the market return is made from ret
    return sorted(needed)


def pass_size(names: list[str]) -> tuple[int, int]:
    """Per-day intermediate columns and distinct per-day sums the measures' plans compute in their one pass."""
    from liqpanel.measures import REGISTRY, resolve_options
    from liqpanel.measures.plan import _distinct, _steps

    plans = {}
    for name in names:
        options = resolve_options(REGISTRY[name], None)
        options.pop("min_days")
        plans[name] = REGISTRY[name].plan(**options)
    return sum(len(level) for level in _steps(plans)), len(_distinct(plans, "sums")[0])


def _peak_bytes() -> int:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024  # Linux reports kilobytes


def _run_ours(path: str, names: list[str], options: dict | None = None) -> tuple[float, int, int]:
    """compute_monthly on a scan of the panel: seconds, output rows, peak bytes of this process."""
    import polars as pl

    from bench.measures_naive import OPTIONS  # imported before the clock starts: pandas is the baseline's, not ours
    from liqpanel.measures import compute_monthly

    started = time.perf_counter()
    options = {**OPTIONS, **(options or {})}
    out = compute_monthly(pl.scan_parquet(path), {n: options.get(n) for n in names})
    return time.perf_counter() - started, out.height, _peak_bytes()


def _run_gibbs(path: str, securities: list[str], sweeps: int, burn: int) -> tuple[float, int, int]:
    """The registered Gibbs measure on the given securities: seconds, sampled months, peak bytes."""
    import polars as pl

    from liqpanel.measures import compute_monthly

    lf = pl.scan_parquet(path).filter(pl.col("security").is_in(securities))
    started = time.perf_counter()
    out = compute_monthly(lf, {"gibbs_spread": {"sweeps": sweeps, "burn": burn}})
    seconds = time.perf_counter() - started
    sampled = int((out["gibbs_spread_n"] >= 3).sum())  # the sampler runs on every month with 3 returns or more
    return seconds, sampled, _peak_bytes()


def _run_lot(path: str, securities: list[str]) -> tuple[float, int, int]:
    """Both registered LOT measures on the given securities: seconds, fitted months, peak bytes."""
    import polars as pl

    from liqpanel.measures import compute_monthly

    lf = pl.scan_parquet(path).filter(pl.col("security").is_in(securities))
    started = time.perf_counter()
    out = compute_monthly(lf, {name: None for name in LOT})
    seconds = time.perf_counter() - started
    return seconds, int(out["lot_ysplit_converged"].is_not_null().sum()), _peak_bytes()


def _run_naive_lot(path: str, securities: list[str], months: int) -> tuple[float, int, int]:
    from bench.measures_naive import lot_per_month

    seconds, done = lot_per_month(path, securities, months=months)
    return seconds, done, _peak_bytes()


def _run_each(path: str, names: list[str], repeat: int) -> dict[str, tuple[float, float | None]]:
    """Each measure alone, ours and the vectorised baseline's, on tables read and prepared once: name -> seconds.

    Ours: the measure's plan in the single pass (``liqpanel.measures.plan.evaluate``) on the sorted, flagged table
    the stage prepares; the vectorised baseline: its function on the panel ``bench.measures_naive.prepare`` made.
    Reading and preparing are left out on both sides, so these are the costs of the measures themselves.
    """
    import pandas as pd
    import polars as pl

    from bench.measures_naive import OPTIONS, prepare
    from bench.measures_vectorised import FUNCTIONS, _Month
    from liqpanel.measures import REGISTRY, resolve_options
    from liqpanel.measures.market import add_market_return
    from liqpanel.measures.plan import evaluate
    from liqpanel.measures.plan import prepare as prepare_table

    table = add_market_return(prepare_table(pl.scan_parquet(path)).lazy()).collect(engine="in-memory")
    month = _Month(prepare(pd.read_parquet(path)))
    out = {}
    for name in names:
        options = resolve_options(REGISTRY[name], OPTIONS.get(name))
        options.pop("min_days")
        plan = REGISTRY[name].plan(**options)
        ours = vectorised = float("inf")
        for _ in range(max(repeat, 1)):
            started = time.perf_counter()
            evaluate(table, {name: plan})
            ours = min(ours, time.perf_counter() - started)
            if name in FUNCTIONS:
                started = time.perf_counter()
                FUNCTIONS[name](month)
                vectorised = min(vectorised, time.perf_counter() - started)
        out[name] = (ours, vectorised if name in FUNCTIONS else None)
    return out


def format_costs(costs: dict[str, tuple[float, float | None]], stage: float) -> str:
    """Each measure's cost alone, ours and the vectorised baseline's, and ours as a share of the sum of ours."""
    header = f"{'measure':<26}{'ours s':>9}{'vector s':>10}{'ratio':>8}{'share':>8}"
    total = sum(ours for ours, _ in costs.values())
    lines = [header, "-" * len(header)]
    for name, (ours, vectorised) in sorted(costs.items(), key=lambda kv: -kv[1][0]):
        ratio = f"{vectorised / ours:7.1f}x" if vectorised is not None else "-"
        lines.append(f"{name:<26}{ours:>9.3f}{_fmt(vectorised, '10.3f'):>10}{ratio:>8}{ours / total:>8.0%}")
    lines.append(f"(each alone, table read and prepared once; the measures together in one pass: {stage:.2f} s with "
                 f"reading and preparing, against {total:.2f} s for the measures alone one by one)")
    return "\n".join(lines)


def _run_floor(path: str, columns: list[str]) -> tuple[float, int, int]:
    """One scan of the panel, each column aggregated once per security-month."""
    import polars as pl

    started = time.perf_counter()
    out = pl.scan_parquet(path).group_by("security", "month").agg(pl.col(columns).sum()).collect(engine="in-memory")
    return time.perf_counter() - started, out.height, _peak_bytes()


def _run_naive(path: str, names: list[str], securities: list[str]) -> tuple[float, int, int]:
    from bench.measures_naive import time_monthly

    seconds, rows, _ = time_monthly(path, names, securities)
    return seconds, rows, _peak_bytes()


def _run_vectorised(path: str, names: list[str]) -> tuple[float, int, int]:
    from bench.measures_vectorised import FUNCTIONS, time_monthly

    seconds, rows, _ = time_monthly(path, [n for n in names if n in FUNCTIONS])  # see FUNCTIONS: a conservative ratio
    return seconds, rows, _peak_bytes()


def _run_naive_gibbs(path: str, securities: list[str], months: int, sweeps: int, burn: int) -> tuple[float, int, int]:
    from bench.measures_naive import gibbs_per_month

    seconds, done = gibbs_per_month(path, securities, months=months, sweeps=sweeps, burn=burn, seed=1984)
    return seconds, done, _peak_bytes()


def in_fresh_process(function, *args):
    """Run ``function(*args)`` in a new interpreter, so its timing and peak memory are its own."""
    with multiprocessing.get_context("spawn").Pool(1) as pool:
        return pool.apply(function, args)


def fastest(isolate, repeat: int, function, *args) -> tuple[float, int, int]:
    """The fastest of ``repeat`` isolated runs (other work on the machine only slows a run down), the highest peak."""
    runs = [isolate(function, *args) for _ in range(max(repeat, 1))]
    seconds, count, _ = min(runs, key=lambda r: r[0])
    return seconds, count, max(r[2] for r in runs)  # the highest peak memory of the runs


@dataclass
class Row:
    label: str
    measures: int
    rows: int
    ours: float
    baseline: float | None
    floor: float | None
    peak: int
    vectorised: float | None = None

    @property
    def ratio(self) -> float | None:
        return self.baseline / self.ours if self.baseline is not None else None

    @property
    def vectorised_ratio(self) -> float | None:
        return self.vectorised / self.ours if self.vectorised is not None else None

    @property
    def over_floor(self) -> float | None:
        return self.ours / self.floor if self.floor is not None else None


def _fmt(value: float | None, spec: str) -> str:
    return "-" if value is None else format(value, spec)


def format_table(rows: list[Row]) -> str:
    header = (f"{'family':<22}{'measures':>9}{'rows':>12}{'ours s':>10}{'naive s':>10}{'ratio':>8}{'vector s':>10}"
              f"{'ratio':>8}{'floor s':>9}{'ours/floor':>12}{'peak GB':>9}")
    lines = [header, "-" * len(header)]
    for r in rows:
        lines.append(
            f"{r.label:<22}{r.measures:>9}{r.rows:>12,}{r.ours:>10.2f}{_fmt(r.baseline, '10.1f'):>10}"
            f"{_fmt(r.ratio, '7.0f') + 'x' if r.ratio else '-':>8}{_fmt(r.vectorised, '10.2f'):>10}"
            f"{_fmt(r.vectorised_ratio, '7.1f') + 'x' if r.vectorised_ratio else '-':>8}{_fmt(r.floor, '9.2f'):>9}"
            f"{_fmt(r.over_floor, '11.1f') + 'x' if r.over_floor else '-':>12}{r.peak / GIB:>9.2f}"
        )
    return "\n".join(lines)


def verdicts(total: Row, gibbs: Row | None, default_size: bool) -> list[str]:
    def mark(ok: bool) -> str:
        return "met" if ok else "MISSED"

    out = [
        f"all daily measures vs naive baseline: {total.ratio:.0f}x (target >= {TARGET_RATIO:.0f}x): {mark(total.ratio >= TARGET_RATIO)}",
        f"all daily measures vs vectorised pandas baseline: {total.vectorised_ratio:.1f}x "
        f"(target >= {TARGET_VECTORISED_RATIO:.0f}x): {mark(total.vectorised_ratio >= TARGET_VECTORISED_RATIO)}",
        f"all daily measures vs one-pass floor: {total.over_floor:.1f}x (target <= {TARGET_FLOOR:.0f}x): {mark(total.over_floor <= TARGET_FLOOR)}",
        f"peak memory: {total.peak / GIB:.2f} GB (target < {TARGET_MEMORY_GB:.0f} GB at the default size"
        + ("" if default_size else "; this run is not at the default size") + f"): {mark(total.peak / GIB < TARGET_MEMORY_GB)}",
    ]
    if gibbs is not None:
        out.append(f"Gibbs sampler vs per-month loop: {gibbs.ratio:.0f}x (target >= {TARGET_GIBBS_RATIO:.0f}x): "
                   f"{mark(gibbs.ratio >= TARGET_GIBBS_RATIO)}")
    return out


def machine() -> str:
    memory = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") / GIB
    import polars as pl

    return (f"{os.cpu_count()} cores, {memory:.0f} GB memory, Python {platform.python_version()}, "
            f"polars {pl.__version__}, numpy {np.__version__}")


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="python -m bench.measures", description=__doc__.split("\n\n")[0])
    p.add_argument("--securities", type=int, default=5000, help="securities in the synthetic panel (default 5000)")
    p.add_argument("--years", type=float, default=5.0, help="years of business days, 252 a year (default 5)")
    p.add_argument("--baseline-fraction", type=float, default=0.02,
                   help="share of the securities the naive baseline runs on, its time scaled by rows (default 0.02)")
    p.add_argument("--gibbs-fraction", type=float, default=0.05,
                   help="share of the securities the Gibbs sampler runs on (default 0.05; 0 skips the Gibbs row)")
    p.add_argument("--gibbs-months", type=int, default=40,
                   help="security-months of the per-month Gibbs loop (default 40)")
    p.add_argument("--lot-fraction", type=float, default=1.0,
                   help="share of the securities the LOT fits run on (default 1: the whole panel, so their share of "
                        "the stage is measured, not scaled; 0 skips the LOT row)")
    p.add_argument("--lot-months", type=int, default=40, help="security-months of the per-month LOT loop (default 40)")
    p.add_argument("--sweeps", type=int, default=1000, help="Gibbs sweeps (default 1000, 20%% burn-in)")
    p.add_argument("--repeat", type=int, default=3,
                   help="runs of ours and of the floor, the fastest kept (default 3; the baseline runs once)")
    p.add_argument("--workdir", default=None, help="folder for the panel (default: a temporary folder, removed)")
    p.add_argument("--seed", type=int, default=20240601, help="seed of the synthetic panel and the subsamples")
    return p


def run(args: argparse.Namespace, echo=print, isolate=in_fresh_process) -> tuple[list[Row], list[str]]:
    """Run every comparison; return the table rows and the verdict lines.

    ``isolate(function, *args)`` runs each timed step (by default in a fresh
    process; a smoke test may call the function directly).
    """
    from bench.measures_data import write_panel

    if not 0.0 < args.baseline_fraction <= 1.0 or not 0.0 <= args.gibbs_fraction <= 1.0:
        raise SystemExit("--baseline-fraction must lie in (0, 1] and --gibbs-fraction in [0, 1]")
    workdir = Path(args.workdir or tempfile.mkdtemp(prefix="liqpanel-bench-"))
    try:
        path = str(workdir / f"daily_{args.securities}x{args.years:g}y.parquet")
        started = time.perf_counter()
        write_panel(path, args.securities, args.years, seed=args.seed)
        echo(f"synthetic panel: {args.securities} securities x {args.years:g} years -> {path} "
             f"({time.perf_counter() - started:.0f} s to write)")
        names = [f"S{i:06d}" for i in range(args.securities)]
        rng = np.random.default_rng(args.seed)
        sample = sorted(rng.choice(names, max(1, round(args.baseline_fraction * len(names))), replace=False).tolist())
        families = _families()
        rows: list[Row] = []
        baselines = 0.0
        for family, members in [*families.items(), ("all daily measures", [n for m in families.values() for n in m])]:
            ours, months, peak = fastest(isolate, args.repeat, _run_ours, path, members)
            floor, _, _ = fastest(isolate, args.repeat, _run_floor, path, _columns_read(members))
            vectorised, _, _ = fastest(isolate, args.repeat, _run_vectorised, path, members)
            if family == "all daily measures":
                baseline = baselines  # the same computations as the families' baselines together
            else:
                naive, naive_rows, _ = isolate(_run_naive, path, members, sample)
                baseline = naive * daily_rows(path) / naive_rows
                baselines += baseline
            rows.append(Row(family, len(members), daily_rows(path), ours, baseline, floor, peak, vectorised))
            echo(f"  {family}: ours {ours:.2f} s, naive baseline {baseline:.1f} s (scaled), "
                 f"vectorised baseline {vectorised:.2f} s, floor {floor:.2f} s")
        gibbs = None
        if args.gibbs_fraction > 0:
            burn = args.sweeps // 5
            chosen = sorted(rng.choice(names, max(1, round(args.gibbs_fraction * len(names))), replace=False).tolist())
            ours_runs, loop_runs = [], []
            for _ in range(max(args.repeat, 1)):  # side by side, in turn, so both see the same load; the fastest of each
                ours_runs.append(isolate(_run_gibbs, path, chosen, args.sweeps, burn))
                loop_runs.append(isolate(_run_naive_gibbs, path, chosen, args.gibbs_months, args.sweeps, burn))
            ours, months, _ = min(ours_runs, key=lambda r: r[0])
            peak = max(r[2] for r in ours_runs)
            loop, loop_months, _ = min(loop_runs, key=lambda r: r[0])
            gibbs = Row(f"gibbs ({args.sweeps} sweeps)", 1, months, ours, loop / loop_months * months, None, peak)
            echo(f"  gibbs: ours {ours:.1f} s for {months} security-months, loop {loop:.1f} s for {loop_months}")
        lot, lot_lines = None, []
        if getattr(args, "lot_fraction", 0) > 0:
            chosen = sorted(rng.choice(names, max(1, round(args.lot_fraction * len(names))), replace=False).tolist())
            ours, months, peak = fastest(isolate, args.repeat, _run_lot, path, chosen)
            loop, loop_months, _ = isolate(_run_naive_lot, path, chosen, args.lot_months)
            lot = Row("lot (mixed + Y-split)", 2, months, ours, loop / max(loop_months, 1) * months, None, peak)
            echo(f"  lot: ours {ours:.1f} s for {months} security-months, loop {loop:.1f} s for {loop_months}")
            whole = ours * len(names) / len(chosen)  # scaled by securities to the whole panel
            scaled = "" if len(chosen) == len(names) else ", LOT scaled by securities to the whole panel"
            lot_lines.append(f"LOT share of the measures stage (all daily measures + both LOT fits{scaled}): "
                             f"{whole / (whole + rows[-1].ours):.0%} ({whole:.2f} s of {whole + rows[-1].ours:.2f} s)")
            if len(chosen) == len(names):  # the stage itself with both fits selected: what they add to it
                members = [n for m in families.values() for n in m]
                stage, _, _ = fastest(isolate, args.repeat, _run_ours, path, [*members, *LOT])
                added = stage - rows[-1].ours
                lot_lines.append(f"LOT share of one run of the stage with every daily measure and both LOT fits: "
                                 f"{added / stage:.0%} ({added:.2f} s of {stage:.2f} s; the table read and prepared once)")
        default_size = args.securities == 5000 and args.years == 5.0
        extra = [r for r in (gibbs, lot) if r is not None]
        everything = [n for m in families.values() for n in m]
        costs = isolate(_run_each, path, everything, args.repeat)
        return rows + extra, verdicts(rows[-1], gibbs, default_size) + lot_lines + ["", format_costs(costs, rows[-1].ours)]
    finally:
        if args.workdir is None:
            shutil.rmtree(workdir, ignore_errors=True)


def daily_rows(path: str) -> int:
    import pyarrow.parquet as pq

    return pq.ParquetFile(path).metadata.num_rows


def main(argv: list[str] | None = None) -> int:
    args = _parser().parse_args(argv)
    print(f"machine: {machine()}")
    rows, lines = run(args, echo=lambda text: print(text, flush=True))
    print()
    print(format_table(rows))
    print("rows: daily rows (Gibbs, LOT: security-months fitted); ratio: that baseline / ours; the naive baseline "
          "scaled by rows, the vectorised one run on the whole panel (it has every measure of daily bars but "
          "effective_tick: against the spread family its ratio understates ours)")
    print()
    print("\n".join(lines))
    names = [n for members in _families().values() for n in members]
    steps, sums = pass_size(names)
    print(f"(one pass of the measures stage: {steps} per-day intermediate columns and {sums} per-day sums for "
          f"{len(names)} measures; the floor sums {len(_columns_read(names))} columns)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
