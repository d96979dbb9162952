"""The package's layers: no module imports from a layer above its own.

Data flows clean -> bars -> measures -> panel -> models -> report; the
shared plumbing (``liqpanel.core``) sits under every stage, and each stage's
file-level jobs (its ``job`` module, the face the workflow's rules call) sit
above every stage's logic. Every import of every
module is read from its source (function-level imports included), so an
import that runs upward fails here before it shows up as a cycle or as a
heavy module loaded by a light job.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "src" / "liqpanel"

# the stages that come after the reading, cleaning, bars and measures of the data
LATER = ("liqpanel.panel", "liqpanel.models", "liqpanel.factors", "liqpanel.report", "liqpanel.study", "liqpanel.cli")
EARLY = ("liqpanel.core", "liqpanel.ingest", "liqpanel.clean", "liqpanel.markets", "liqpanel.bars", "liqpanel.measures")
TOP = ("liqpanel.cli", "liqpanel.__main__")


def is_job(name: str) -> bool:
    """A stage's face: ``liqpanel.<stage>.job`` (and ``liqpanel.bars.daily_job``), called by the rules."""
    return name.rsplit(".", 1)[-1] in ("job", "daily_job")


def module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def imports_of(path: Path) -> set[str]:
    """Every liqpanel module ``path`` imports, at the top or inside a function."""
    out = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.Import):
            out |= {alias.name for alias in node.names}
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            out |= {node.module} | {f"{node.module}.{alias.name}" for alias in node.names}
    return {name for name in out if name == "liqpanel" or name.startswith("liqpanel.")}


MODULES = {module_name(p): imports_of(p) for p in sorted(PACKAGE.rglob("*.py"))}


def within(name: str, prefixes: tuple[str, ...]) -> bool:
    return any(name == p or name.startswith(p + ".") for p in prefixes)


def test_the_modules_are_found():
    assert "liqpanel.core.errors" in MODULES and "liqpanel.bars.job" in MODULES and is_job("liqpanel.bars.job")
    assert "liqpanel.core.errors" in MODULES["liqpanel.core.io"]  # the reader sees imports


@pytest.mark.parametrize("name", sorted(n for n in MODULES if within(n, ("liqpanel.core",))))
def test_core_imports_nothing_outside_core(name):
    upward = sorted(i for i in MODULES[name] if not within(i, ("liqpanel.core",)) and i != "liqpanel")
    assert upward == [], f"{name} imports {upward}"


@pytest.mark.parametrize("name", sorted(n for n in MODULES if within(n, EARLY) and not is_job(n)))
def test_reading_cleaning_bars_and_measures_import_no_later_stage(name):
    upward = sorted(i for i in MODULES[name] if within(i, LATER))
    assert upward == [], f"{name} imports {upward}"


@pytest.mark.parametrize("name", sorted(n for n in MODULES if not within(n, TOP) and not is_job(n)))
def test_only_the_top_imports_the_jobs(name):
    upward = sorted(i for i in MODULES[name] if is_job(i) or within(i, ("liqpanel.cli",)))
    assert upward == [], f"{name} imports {upward}"
