"""Every check together: ``preflight(config)``, and the lines printed for its problems."""

from __future__ import annotations

import copy
from dataclasses import replace
from typing import Any, Callable

from liqpanel.preflight.config_checks import input_sources, schema_problems
from liqpanel.preflight.files import FILE_CHECKS, check_files
from liqpanel.preflight.folders import folder_problems
from liqpanel.preflight.market_checks import market_problems
from liqpanel.preflight.problem import Problem
from liqpanel.preflight.ranges import window_warnings
from liqpanel.preflight.sections import (
    clean_problems, measure_input_problems, measure_problems, panel_problems, study_problems,
)


def preflight(config: Any, *, source: str = "config", target: str = "all") -> list[Problem]:
    """Every problem of ``config`` (as written) and its inputs; warnings have ``level == "warning"``.

    ``target`` is what will run: ``all`` (the whole workflow) or ``study``
    (the estimator study alone, which fits no model: the panel and model
    settings are not checked, and a measure whose inputs are missing, whose
    values will all be missing, is a warning).
    """
    from liqpanel.config import fill_defaults, load_schema

    problems = schema_problems(config, source)
    broken = bool(problems)  # a check may then meet values of the wrong kind
    if not isinstance(config, dict):
        return problems
    config = fill_defaults(copy.deepcopy(config), load_schema())
    sources = input_sources(config)
    for input_source in sources:
        problems += check_files(input_source)
        for check in FILE_CHECKS:
            problems += _guarded(check, input_source, broken)
    steps = [market_problems, measure_problems, study_problems, folder_problems, lambda c: clean_problems(c, sources)]
    if target == "all":
        steps += [panel_problems, lambda c: measure_input_problems(c, sources)]
    for step in steps:
        problems += _guarded(step, config, broken)
    if target == "study":
        problems += [replace(p, level="warning") for p in _guarded(lambda c: measure_input_problems(c, sources),
                                                                   config, broken)]
    if not [p for p in problems if p.level == "error"]:
        problems += window_warnings(config, sources)
    return _unique(problems)


def _guarded(check: Callable[[Any], list[Problem]], subject: Any, broken: bool) -> list[Problem]:
    """``check(subject)``; when the config breaks the schema (already listed), a check that trips over
    a value of the wrong kind adds nothing. A config that passes the schema must not break a check."""
    try:
        return check(subject)
    except Exception:
        if not broken:
            raise
        return []


def _unique(problems: list[Problem]) -> list[Problem]:
    seen, out = set(), []
    for p in problems:
        if (p.where, p.message) not in seen:
            seen.add((p.where, p.message))
            out.append(p)
    return out


def errors(problems: list[Problem]) -> list[Problem]:
    return [p for p in problems if p.level == "error"]


def warnings(problems: list[Problem]) -> list[Problem]:
    return [p for p in problems if p.level == "warning"]


def report_lines(problems: list[Problem]) -> list[str]:
    """The lines printed for ``problems``: errors first, then warnings, each prefixed by the program's name."""
    errs = errors(problems)
    lines = [f"liqpanel: {p}" for p in errs + warnings(problems)]
    if errs:
        lines.append(f"liqpanel: {len(errs)} problem{'s' if len(errs) != 1 else ''} found; nothing was run")
    return lines
