"""Check a cluster run of the workflow against a local run of the same config.

Usage: python check_cluster_run.py LOCAL_DIR CLUSTER_DIR

1. Every job of the cluster run except the target rule `all` was submitted to
   SLURM: the Snakemake log names a SLURM job id for each, the ids are
   distinct, slurmctld reports each as COMPLETED (squeue --states=all; the
   test cluster keeps finished jobs for an hour), and each job's SLURM log
   shows its rule finishing.
2. The plan has one job per span of months for each of clean + bars, daily
   and measures (run.span_months of the config, a calendar year by default)
   and one job for each whole-sample stage: the count of SLURM jobs is
   exactly that.
3. Both runs wrote the same results folder (same run-id), byte-identical CSV
   tables, and equal Parquet tables, under results/ and under work/ (every
   partition).
Exits non-zero with a message naming the first difference.
"""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import polars as pl
from polars.testing import assert_frame_equal

RULE = re.compile(r"^(local)?rule (\w+):$", re.M)
SUBMITTED = re.compile(r"^Job (\d+) has been submitted with SLURM jobid (\d+) \(log: (.+)\)\.$", re.M)


def fail(message: str) -> None:
    print(f"check: FAILED: {message}", file=sys.stderr)
    sys.exit(1)


def check_jobs(cluster: Path) -> int:
    logs = sorted((cluster / ".snakemake" / "log").glob("*.snakemake.log"))
    if not logs:
        fail(f"no Snakemake log under {cluster}/.snakemake/log")
    text = logs[-1].read_text()
    rules = RULE.findall(text)
    local = [name for is_local, name in rules if is_local and name != "all"]
    if local:
        fail(f"jobs ran outside SLURM: {sorted(set(local))}")
    remote = [name for is_local, name in rules if not is_local]
    submitted = SUBMITTED.findall(text)
    ids = [slurm_id for _, slurm_id, _ in submitted]
    if len(submitted) != len(remote) or not remote:
        fail(f"{len(remote)} jobs ran but {len(submitted)} were submitted to SLURM")
    if len(set(ids)) != len(ids):
        fail("a SLURM job id was reported for two jobs")

    queue = subprocess.run(
        ["squeue", "--states=all", "--noheader", "--format=%i|%T", "--jobs=" + ",".join(ids)],
        capture_output=True, text=True, check=True,
    ).stdout
    states = dict(line.split("|", 1) for line in queue.split())
    not_done = {i: states.get(i, "unknown to slurmctld") for i in ids if states.get(i) != "COMPLETED"}
    if not_done:
        fail(f"SLURM jobs not COMPLETED: {dict(list(not_done.items())[:5])}")

    for _, slurm_id, log in submitted:
        path = Path(log)
        rule = next((part for part in path.parts if part.startswith("rule_")), "?").removeprefix("rule_")
        if not path.exists():
            fail(f"SLURM log of job {slurm_id} is missing: {path}")
        if f"(Rule: {rule})" not in path.read_text():
            fail(f"SLURM job {slurm_id} ({path}) does not show rule {rule} finishing")
    counts: dict[str, int] = {}
    for name in remote:
        stage = re.sub(r"_\d{4}_\d{2}$", "", name)  # a span's job: stage_<first month>
        counts[stage] = counts.get(stage, 0) + 1
    print(f"check: {len(ids)} jobs ran as SLURM jobs {min(map(int, ids))}-{max(map(int, ids))}, "
          f"all COMPLETED: " + ", ".join(f"{k} {v}" for k, v in sorted(counts.items())))
    return len(ids)


def check_job_count(cluster: Path, jobs: int) -> None:
    """One job per span and span stage, one per whole-sample stage: nothing per month."""
    from liqpanel.config import load_config
    from liqpanel.core.io import month_range
    from liqpanel.core.partition import spans

    config = load_config(cluster / "config" / "config.yaml")
    months = month_range(config["sample"]["start"], config["sample"]["end"])
    n_spans = len(spans(months, config["run"]["span_months"]))
    whole = ["audit", "monthly", "panel", "models", "factors", "report"] + (["study"] if config["study"]["in_report"] else [])
    expected = 3 * n_spans + len(whole)
    if jobs != expected:
        fail(f"{jobs} SLURM jobs for {len(months)} months; the plan has {expected} "
             f"({n_spans} spans x clean + bars, daily, measures; {', '.join(whole)})")
    print(f"check: {jobs} jobs for {len(months)} months in {n_spans} spans of "
          f"{config['run']['span_months']} months, as planned")


def same_tree(local: Path, cluster: Path, pattern: str) -> int:
    left = sorted(p.relative_to(local) for p in local.glob(pattern))
    right = sorted(p.relative_to(cluster) for p in cluster.glob(pattern))
    if left != right:
        fail(f"different files {pattern}: only local {sorted(set(left) - set(right))[:5]}, "
             f"only cluster {sorted(set(right) - set(left))[:5]}")
    if not left:
        fail(f"no files {pattern} under {local}")
    for rel in left:
        if rel.suffix == ".parquet":
            try:
                assert_frame_equal(pl.read_parquet(local / rel), pl.read_parquet(cluster / rel))
            except AssertionError as exc:
                fail(f"{rel} differs: {exc}")
        elif (local / rel).read_bytes() != (cluster / rel).read_bytes():
            fail(f"{rel} differs")
    return len(left)


def check_tables(local: Path, cluster: Path) -> None:
    run_local = (local / "results" / "latest").resolve()
    run_cluster = (cluster / "results" / "latest").resolve()
    if run_local.name != run_cluster.name:
        fail(f"run-ids differ: local {run_local.name}, cluster {run_cluster.name}")
    n_results = same_tree(run_local, run_cluster, "**/*.csv") + same_tree(run_local, run_cluster, "**/*.parquet")
    n_work = same_tree(local / "work", cluster / "work", "**/*.parquet")
    print(f"check: run {run_local.name}: {n_results} result tables and {n_work} work partitions "
          "equal to the local run")


if __name__ == "__main__":
    if len(sys.argv) != 3:
        sys.exit(__doc__)
    local_dir, cluster_dir = (Path(p).resolve() for p in sys.argv[1:])
    check_job_count(cluster_dir, check_jobs(cluster_dir))
    check_tables(local_dir, cluster_dir)
