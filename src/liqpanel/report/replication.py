"""The replication files written into every run folder.

``README.md`` (from ``templates/replication_readme.md``): what was run, on
which data (with checksums), how to rerun it and check the tables, and how
long it took. ``config.yaml``: the configuration as run, defaults filled in,
so a rerun needs no other settings. ``inputs.sha256``: the input checksums
in the two-column format ``sha256sum -c`` reads.
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path
from string import Template
from typing import Any

import yaml

import liqpanel
from liqpanel.core.io import write_text

TEMPLATE = "replication_readme.md"


def _duration(seconds: float | None) -> str:
    if seconds is None:
        return "an unknown time"
    if seconds < 90:
        return f"{seconds:.0f} seconds"
    minutes = seconds / 60
    return f"{minutes:.0f} minutes" if minutes < 90 else f"{minutes / 60:.1f} hours"


def _models(config: dict) -> str:
    models = (config.get("models") or {}).get("regressions") or []
    if not models:
        return "none"
    return "; ".join(f"`{m['name']}` ({', '.join(m['regressors'])})" for m in models)


def _contents(contents: dict[str, dict]) -> str:
    lines = []
    for kind, folder, suffixes in (("tables", "tables", "CSV, LaTeX, Markdown"), ("figures", "figures", "PNG, PDF")):
        items = contents.get(kind) or {}
        if items:
            lines.append(f"- `{folder}/` ({suffixes}):")
            lines += [f"  - `{name}`: {entry.get('caption', name)}" for name, entry in items.items()]
    return "\n".join(lines) if lines else "- no tables or figures"


def readme_text(
    *, rid: str, config: dict, inputs: list[dict[str, Any]], contents: dict[str, dict], command: str,
    git: dict[str, Any], machine: dict[str, Any], elapsed: float | None,
) -> str:
    """The run folder's README, filled in from the manifest's facts."""
    rows = "\n".join(f"| `{e['role']}` | `{e['path']}` | {e['rows'] if e['rows'] is not None else ''} | `{e['sha256']}` |" for e in inputs)
    revision = git.get("revision") or "unknown"
    text = (resources.files("liqpanel") / "templates" / TEMPLATE).read_text()
    return Template(text).substitute(
        run_id=rid,
        run_name=config.get("run", {}).get("name", "run"),
        sample_start=config["sample"]["start"],
        sample_end=config["sample"]["end"],
        market=config.get("market") or ", ".join(
            f"{code}: {name}" for code, name in (config.get("markets") or {}).get("profiles", {}).items()),
        measures=", ".join(f"`{m}`" for m in config.get("measures") or {}) or "none",
        models=_models(config),
        version=liqpanel.__version__,
        git_revision=revision,
        git_dirty=" (with uncommitted changes: the code that ran is not exactly that revision)" if git.get("dirty") else "",
        command=command,
        input_rows=rows,
        contents=_contents(contents),
        results_dir=config.get("run", {}).get("results_dir", "results"),
        work_dir=config.get("run", {}).get("work_dir", "work"),
        elapsed=_duration(elapsed),
        machine_text=(
            f"{machine.get('platform')} with {machine.get('cpus')} CPUs "
            f"(table engine threads: {machine.get('engine_threads')})"
        ),
    )


def write_replication_files(
    run_dir: str | Path, *, rid: str, config: dict, inputs: list[dict[str, Any]], contents: dict[str, dict],
    command: str, git: dict[str, Any], machine: dict[str, Any], elapsed: float | None,
) -> list[Path]:
    """Write ``README.md``, ``config.yaml`` and ``inputs.sha256`` into ``run_dir``."""
    run_dir = Path(run_dir)
    readme = readme_text(
        rid=rid, config=config, inputs=inputs, contents=contents, command=command, git=git, machine=machine,
        elapsed=elapsed,
    )
    header = f"# liqpanel {liqpanel.__version__}: the configuration of run {rid} as run (defaults filled in)\n"
    return [
        write_text(readme, run_dir / "README.md"),
        write_text(header + yaml.safe_dump(config, sort_keys=False), run_dir / "config.yaml"),
        write_text("".join(f"{e['sha256']}  {e['path']}\n" for e in inputs), run_dir / "inputs.sha256"),
    ]
