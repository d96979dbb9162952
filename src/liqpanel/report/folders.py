"""The run folder on disk: built beside its place, moved in at once, ``latest`` pointed at it; Snakemake's HTML report labels."""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path
from typing import Any


def build_folder(results_dir: str | Path, rid: str) -> Path:
    """An empty folder beside ``results/<rid>`` to build the run in.

    The run is built there and moved into place by :func:`publish_folder`, so
    ``results/<rid>`` is either absent or complete; a build left by a killed
    run is removed here.
    """
    results_dir = Path(results_dir)
    results_dir.mkdir(parents=True, exist_ok=True)
    for stale in results_dir.glob(f".{rid}.building-*"):
        shutil.rmtree(stale, ignore_errors=True)
    folder = results_dir / f".{rid}.building-{os.getpid()}"
    folder.mkdir()
    return folder
from liqpanel.report.identity import run_id


def publish_folder(folder: Path, run_dir: str | Path) -> Path:
    """Move a finished build into ``run_dir`` in one step (an earlier copy is replaced)."""
    run_dir = Path(run_dir)
    if run_dir.exists():
        old = run_dir.with_name(f".{run_dir.name}.replaced-{os.getpid()}")
        os.replace(run_dir, old)
        shutil.rmtree(old, ignore_errors=True)
    os.replace(folder, run_dir)
    return run_dir


def _manifest_entry(run_dir: str | Path, kind: str, name: str) -> dict[str, Any]:
    try:
        manifest = json.loads((Path(run_dir) / "manifest.json").read_text())
    except (OSError, ValueError):
        return {}
    return (manifest.get(kind) or {}).get(name) or {}


def report_category(wildcards: Any) -> str:
    """Snakemake HTML report: the category of a file matched by the report rule's patterns."""
    return "Tables" if hasattr(wildcards, "table") else "Figures"


def report_labels(wildcards: Any, output: Any) -> dict[str, str]:
    """Snakemake HTML report: a table's or figure's name and caption, read from the run's manifest."""
    kind, name = ("tables", wildcards.table) if hasattr(wildcards, "table") else ("figures", wildcards.figure)
    return {"name": name, "caption": _manifest_entry(output[0], kind, name).get("caption", name.replace("_", " "))}


def point_latest(results_dir: Path, rid: str) -> None:
    """Make ``results/latest`` a relative symlink to the newest run."""
    link = results_dir / "latest"
    tmp = results_dir / f".latest.{os.getpid()}"
    if tmp.is_symlink() or tmp.exists():
        tmp.unlink()
    tmp.symlink_to(rid)
    os.replace(tmp, link)


def run_folder(config_path: str | Path) -> Path:
    """``results_dir/<run-id>``: where a run of the config at ``config_path`` is written."""
    from liqpanel.config import load_config

    config = load_config(config_path)
    return Path(config["run"]["results_dir"]) / run_id(config)
