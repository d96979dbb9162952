"""The registry of monthly measures.

Each measure is a small pure function ``f(daily: pl.LazyFrame, **options) ->
pl.LazyFrame``. It receives the daily table (see ``liqpanel.core.contracts.DAILY``,
plus ``mkt_ret`` and ``shares_out`` where available) and returns one row per
(``security``, ``month``) holding its output columns, ``n_obs`` (the number of
valid days or day-pairs it used) and optionally ``reason`` (a string saying
why the value is missing, null otherwise).

A measure that is a formula of sums over the month's days (all of them but
the Gibbs sampler) also gives its ``plan`` (``plan(**options) ->
liqpanel.measures.plan.Plan``) and its function is ``run_plan`` of that
plan. The measures stage runs the plans of every selected measure together
in a single pass over the daily table, and the functions of the others one
by one; it applies the minimum-days rule and names the diagnostics
``<name>_n`` and ``<name>_reason``.

Adding a measure: one new module with the plan and the function, one
``Measure`` entry in ``liqpanel/measures/library.py``, one test file.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable

import polars as pl

from liqpanel.core.errors import ConfigError


@dataclass(frozen=True)
class Measure:
    name: str
    function: Callable[..., pl.LazyFrame]
    outputs: tuple[str, ...]
    columns: tuple[str, ...]
    source: str
    family: str
    min_days: int = 15
    options: dict[str, Any] = field(default_factory=dict)
    description: str = ""
    plan: Callable[..., Any] | None = None


REGISTRY: dict[str, Measure] = {}


def register(measure: Measure) -> Measure:
    if measure.name in REGISTRY:
        raise ValueError(f"measure {measure.name!r} registered twice")
    REGISTRY[measure.name] = measure
    return measure


def get_measure(name: str) -> Measure:
    try:
        return REGISTRY[name]
    except KeyError:
        valid = ", ".join(sorted(REGISTRY))
        raise ConfigError(f"unknown measure '{name}' under `measures:`; valid names are: {valid}") from None


def resolve_options(measure: Measure, options: dict[str, Any] | None) -> dict[str, Any]:
    """Fill defaults and reject options the measure does not know."""
    options = dict(options or {})
    unknown = sorted(set(options) - set(measure.options) - {"min_days"})
    if unknown:
        known = ", ".join(sorted(set(measure.options) | {"min_days"}))
        raise ConfigError(
            f"measure '{measure.name}' has no option '{unknown[0]}'; its options are: {known}"
        )
    merged = {**measure.options, **options}
    merged.setdefault("min_days", measure.min_days)
    return merged
