"""The study's settings with their defaults, its constants and the estimators it compares."""

from __future__ import annotations

from datetime import date
from typing import Any

from liqpanel.core.contracts import DAILY
from liqpanel.core.errors import ConfigError
from liqpanel.measures import REGISTRY, get_measure
from liqpanel.measures.blend import NAME as BLEND

KEY = ["security", "month"]
KINDS = ("spread", "volatility")
# volatility estimators of the trading hours only (see liqpanel.measures.volatility)
TRADING_HOURS = frozenset({"vol_parkinson", "vol_garman_klass", "vol_rogers_satchell"})
# columns of the daily table built from simulated trades
SIMULATED_COLUMNS = frozenset(DAILY) | {"vwap"}
# columns the measures stage adds itself: the market return, and the flag of a previous month's
# last day lent to measures that pair consecutive days
SUPPLIED_COLUMNS = frozenset({"mkt_ret", "from_previous_month"})
SIMULATION_START = "2021-01"  # any month: the calendar is business days, the window is what matters
WINDOW_MONTH = date(2021, 1, 1)  # the label of every draw's window (its "month")
WARM_UP_MONTH = date(2020, 12, 1)  # the label of the warm-up day before it
SIMULATION_PRICE = 50.0  # initial price; only relative to a tick does the price level matter
PRICE_STEP = 1.25  # with a tick, draws are simulated in groups whose prices differ by less than this factor
DEFAULTS: dict[str, Any] = {
    "draws": 2000,
    "seed": 20240601,
    "measures": None,
    "spread_column": "effective_spread",
    "fallback_spread": "edge_spread",
    "volatility": "vol_yang_zhang",
    "min_days": 10,
    "trades_per_day_when_unknown": 50.0,
    "overnight_share": 0.0,
    "bins": 4,
    "spread_vol_edges": None,
    "intensity_edges": None,
    "min_cell": 20,
    "blend_max_missing": 0.05,
}


def settings(study: dict[str, Any] | None) -> dict[str, Any]:
    """The study's settings with defaults filled; unknown keys are refused."""
    study = dict(study or {})
    unknown = sorted(set(study) - set(DEFAULTS) - {"in_report"})
    if unknown:
        raise ConfigError(f"unknown key '{unknown[0]}' under study; allowed keys there: {', '.join(sorted(DEFAULTS))}")
    return {**DEFAULTS, **{k: v for k, v in study.items() if k != "in_report"}}


def check_settings(study: dict[str, Any] | None) -> dict[str, Any]:
    """Check that the measures the study names exist and have the right family."""
    s = settings(study)
    for key, family in (("fallback_spread", "spread"), ("volatility", "volatility")):
        measure = _named_measure(s[key], f"study.{key}")
        if measure.family != family:
            raise ConfigError(f"study.{key}: '{s[key]}' is a measure of the {measure.family} family; "
                              f"expected one of the {family} family")
        missing = sorted(set(measure.columns) - set(DAILY) - SUPPLIED_COLUMNS)
        if missing:
            raise ConfigError(f"study.{key}: '{s[key]}' needs daily column(s) {missing}; choose a measure of daily bars")
    for name in s["measures"] or ():
        measure = _named_measure(name, "study.measures")
        if measure.family not in KINDS:
            raise ConfigError(f"study.measures: '{name}' is a measure of the {measure.family} family; the study "
                              "compares spread and volatility estimators with their truth")
        if not _from_daily_bars(measure):
            raise ConfigError(f"study.measures: '{name}' needs daily column(s) "
                              f"{sorted(set(measure.columns) - SIMULATED_COLUMNS - SUPPLIED_COLUMNS)}, "
                              "which simulated daily bars lack")
    for key in ("spread_vol_edges", "intensity_edges"):
        edges = s[key]
        if edges is not None and (len(edges) < 1 or any(b <= a for a, b in zip(edges, edges[1:]))):
            raise ConfigError(f"study.{key}: expected an increasing list of bin edges, got {edges!r}")
    return s


def _from_daily_bars(measure) -> bool:
    """Whether daily bars built from trades give the measure everything it needs."""
    return set(measure.columns) <= SIMULATED_COLUMNS | SUPPLIED_COLUMNS


def _named_measure(name: str, where: str):
    try:
        return get_measure(name)
    except ConfigError as exc:
        raise ConfigError(f"{where}: {exc}") from None


def estimator_selection(measures: dict[str, Any] | None, names: list[str] | None = None) -> dict[str, Any]:
    """The measures the study runs, with their options.

    By default every registered spread and volatility measure whose daily
    columns simulated daily bars provide (high-frequency benchmarks need
    quotes in the daily table and are left out); ``names`` narrows the list.
    Options come from the user's ``measures:`` section where it names the
    measure, so the study runs the estimators as the workflow does.
    """
    measures = measures or {}
    if names is None:
        names = sorted(n for n, m in REGISTRY.items() if m.family in KINDS and _from_daily_bars(m) and n != BLEND)
    return {name: measures.get(name) for name in names}
