"""The manifest: versions, environment, machine, git state, inputs and what the run wrote."""

from __future__ import annotations

import hashlib
import importlib.metadata
import json
import os
import platform
import subprocess
import sys
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import polars as pl

import liqpanel
from liqpanel.core.errors import InputError
from liqpanel.core.io import expand_inputs, sha256_file, write_text


DEPENDENCIES = (
    "polars", "pandas", "pyarrow", "numpy", "scipy", "linearmodels", "statsmodels",
    "matplotlib", "snakemake", "pyyaml", "jsonschema",
)


def _versions() -> dict[str, str]:
    out = {"python": sys.version.split()[0], "liqpanel": liqpanel.__version__}
    for name in DEPENDENCIES:
        try:
            out[name] = importlib.metadata.version(name)
        except importlib.metadata.PackageNotFoundError:
            out[name] = "not installed"
    return out
from liqpanel.report.identity import canonical_json, input_entries, run_identity


def _environment() -> dict[str, str]:
    """Every distribution installed beside liqpanel, with its version."""
    found = {}
    for dist in importlib.metadata.distributions():
        name = dist.metadata["Name"]
        if name:
            found[name.lower()] = dist.version
    return dict(sorted(found.items()))


def machine() -> dict[str, Any]:
    """Where the run ran: platform, processor count, the table engine's threads."""
    return {
        "platform": platform.platform(),
        "processor": platform.processor() or platform.machine(),
        "cpus": os.cpu_count(),
        "python_implementation": platform.python_implementation(),
        "engine_threads": pl.thread_pool_size(),
    }


def _git(args: list[str], cwd: Path) -> str | None:
    try:
        return subprocess.run(["git", *args], cwd=cwd, capture_output=True, text=True, check=True, timeout=20).stdout.strip()
    except (OSError, subprocess.SubprocessError):
        return None


def git_state() -> dict[str, Any]:
    """Revision of the code that ran and whether it had uncommitted changes."""
    repo = Path(liqpanel.__file__).resolve().parents[2]
    if not (repo / "src" / "liqpanel").is_dir():  # installed from a wheel: no source tree to ask
        return {"revision": None, "dirty": None}
    status = _git(["status", "--porcelain", "--untracked-files=no"], repo)
    return {"revision": _git(["rev-parse", "HEAD"], repo), "dirty": bool(status) if status is not None else None}


def _row_count(path: Path) -> int | None:
    if path.suffix == ".parquet":
        return pl.scan_parquet(path).select(pl.len()).collect().item()
    if path.suffix == ".csv":
        return pl.scan_csv(path).select(pl.len()).collect().item()
    return None


def _file_entry(path: Path, root: Path | None = None) -> dict[str, Any]:
    return {
        "path": str(path.relative_to(root)) if root else str(path),
        "sha256": sha256_file(path),
        "bytes": path.stat().st_size,
        "rows": _row_count(path),
    }


def input_listing(config: dict) -> list[dict[str, Any]]:
    """Each input file with the config key that names it, SHA-256, bytes and rows."""
    listing = []
    for where, path in input_entries(config):
        for f in expand_inputs(path):
            listing.append({"role": where, **_file_entry(Path(f))})
    return sorted(listing, key=lambda e: (e["role"], e["path"]))


def check_identity(config: dict, rid: str) -> dict:
    """Recompute the run identity from the files as they are now.

    Raises InputError when it no longer gives ``rid``: an input file or the
    config changed while the workflow ran, and the tables would carry a
    run-id that does not describe them.
    """
    identity = run_identity(config, use_cache=False)
    now = hashlib.sha256(canonical_json(identity).encode()).hexdigest()[:12]
    if now != rid:
        raise InputError(
            f"the inputs changed while the workflow ran: the run started as {rid} but its inputs now give {now}; "
            "run it again on unchanged files"
        )
    return identity


def write_manifest(
    run_dir: Path, *, config: dict, inputs: list[dict[str, Any]] | list[str], rid: str, started: str, command: str,
    finished: str | None = None, identity: dict | None = None, contents: dict | None = None,
) -> Path:
    """``manifest.json``: what ran, on what, where, and what came out.

    Inputs and outputs with SHA-256, bytes and rows; the config as run
    (defaults filled in) and what the run-id hashes; Python and package
    versions (the declared dependencies and everything installed); machine;
    git revision and whether the tree had uncommitted changes; start and
    end times; the command line; the caption of every table and figure.
    """
    run_dir = Path(run_dir)
    outputs = sorted(
        p for p in run_dir.rglob("*")
        if p.is_file() and p.name != "manifest.json" and not p.name.endswith(".part") and p.name != ".snakemake_timestamp"
    )
    finished = finished or now()
    manifest = {
        "run_id": rid,
        "package_version": liqpanel.__version__,
        "started": started,
        "finished": finished,
        "elapsed_seconds": elapsed_seconds(started, finished),
        "command": command,
        "inputs": [e if isinstance(e, dict) else _file_entry(Path(e)) for e in inputs],
        "outputs": [_file_entry(p, run_dir) for p in outputs],
        "config": config,
        "identity": identity,
        "versions": _versions(),
        "environment": _environment(),
        "platform": platform.platform(),
        "machine": machine(),
        "git": git_state(),
        **(contents or {}),
    }
    return write_text(json.dumps(manifest, indent=2, sort_keys=True, default=str) + "\n", run_dir / "manifest.json")


def now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


def elapsed_seconds(started: str, finished: str) -> float | None:
    try:
        return (datetime.fromisoformat(finished) - datetime.fromisoformat(started)).total_seconds()
    except (TypeError, ValueError):
        return None
