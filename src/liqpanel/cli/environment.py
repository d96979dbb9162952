"""Installed package versions against the versions a run recorded.

Every run's ``manifest.json`` records the Python version and the version of
every installed distribution (``environment``). A referee who reruns the
tables on other versions may see other last digits; :func:`compare_versions`
says beforehand which packages differ, so the lock file
(``requirements.lock``) can be installed first.
"""

from __future__ import annotations

import importlib.metadata
import json
import sys
from dataclasses import dataclass
from pathlib import Path

from liqpanel.core.errors import InputError


@dataclass(frozen=True)
class VersionDifference:
    package: str
    recorded: str | None  # None: not in the manifest
    installed: str | None  # None: not installed here

    @property
    def differs(self) -> bool:
        return self.recorded != self.installed


def _normal(name: str) -> str:
    """Distribution names compare case-blind with '-', '_' and '.' alike (PEP 503)."""
    return name.lower().replace("_", "-").replace(".", "-")


def installed_versions() -> dict[str, str]:
    """Python and every distribution installed in this environment."""
    found = {"python": sys.version.split()[0]}
    for dist in importlib.metadata.distributions():
        if dist.metadata["Name"]:
            found.setdefault(_normal(dist.metadata["Name"]), dist.version)
    return found


def manifest_versions(run_folder: str | Path) -> dict[str, str]:
    """Python and package versions recorded in a run folder's ``manifest.json``."""
    path = Path(run_folder)
    path = path if path.name == "manifest.json" else path / "manifest.json"
    try:
        manifest = json.loads(path.read_text())
    except FileNotFoundError:
        raise InputError(f"{path} does not exist; give a run folder (results/<run-id>) or its manifest.json") from None
    except ValueError as exc:
        raise InputError(f"{path} is not valid JSON: {exc}") from None
    recorded = {_normal(k): str(v) for k, v in (manifest.get("environment") or {}).items()}
    python = (manifest.get("versions") or {}).get("python")
    if python:
        recorded["python"] = python
    if not recorded:
        raise InputError(f"{path} records no package versions (no 'environment' or 'versions' entry)")
    return recorded


def compare_versions(recorded: dict[str, str], installed: dict[str, str]) -> list[VersionDifference]:
    """Every package the run recorded, with the installed version (None when absent).

    Packages installed here but not recorded are left out: they played no
    part in the run. liqpanel itself is listed like any other package.
    """
    return [VersionDifference(name, recorded[name], installed.get(name)) for name in sorted(recorded)]


def versions_text(differences: list[VersionDifference], source: str | Path, *, show_all: bool = False) -> str:
    """A plain listing: the packages that differ (or all), and a verdict."""
    differ = [d for d in differences if d.differs]
    shown = differences if show_all else differ
    lines = []
    if shown:
        width = max(len(d.package) for d in shown)
        lines.append(f"{'package':<{width}}  {'recorded':<12}  installed")
        for d in shown:
            mark = "" if d.differs else "  (same)"
            lines.append(f"{d.package:<{width}}  {d.recorded or '-':<12}  {d.installed or 'not installed'}{mark}")
    if differ:
        lines.append(
            f"{len(differ)} of {len(differences)} packages differ from {source}; install the recorded versions "
            "(make install-locked, or pip install -r requirements.lock) before rerunning its tables"
        )
    else:
        lines.append(f"all {len(differences)} recorded packages have the versions of {source}")
    return "\n".join(lines) + "\n"
