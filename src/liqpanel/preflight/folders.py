"""The results and work folders can be written; nothing is created or deleted to find out."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from liqpanel.preflight.problem import Problem


def folder_problems(config: dict) -> list[Problem]:
    """The results and work folders can be written; nothing is created or deleted to find out."""
    run = config.get("run") or {}
    problems = []
    for key, default in (("results_dir", "results"), ("work_dir", "work")):
        folder = run.get(key, default)
        if not isinstance(folder, str):
            continue
        problem = writable_problem(Path(folder))
        if problem:
            problems.append(Problem(f"run.{key}", f"{folder}: {problem}"))
    return problems


def writable_problem(folder: Path) -> str | None:
    """Why files cannot be written in ``folder`` (None when they can).

    Writes and removes one temporary file in the folder, or in its nearest
    existing parent when the folder does not exist yet.
    """
    probe = folder
    while not probe.exists():
        if probe.parent == probe:
            break
        probe = probe.parent
    if probe.exists() and not probe.is_dir():
        return f"{probe} is a file, not a folder"
    try:
        fd, tmp = tempfile.mkstemp(prefix=".liqpanel-write-test.", dir=probe)
    except OSError as exc:
        return f"cannot write in {probe}: {exc.strerror or exc}"
    os.close(fd)
    os.unlink(tmp)
    return None
