"""A run's settings as typed, frozen objects, one per section of the config.

Built once from the validated config (:func:`settings_of`), after the schema
(``workflow/schemas/config.schema.yaml``) has filled in its defaults: the
schema stays the single source of every default, so no field here has one.
A stage's job takes the sections it reads, which its signature then shows
(``run_panel(sample, inputs, market, panel, ...)`` reads nothing else).

Open-ended parts of a section (a measure's options, the clean rules' maps,
a regression's entries) stay as the config wrote them, behind a read-only
view: nothing downstream can change a setting another stage reads.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, fields
from types import MappingProxyType
from typing import Any


def frozen(value: Any) -> Any:
    """``value`` with every mapping made a read-only view and every list a tuple, recursively."""
    if isinstance(value, Mapping):
        return MappingProxyType({key: frozen(item) for key, item in value.items()})
    if isinstance(value, (list, tuple)):
        return tuple(frozen(item) for item in value)
    return value


def thawed(value: Any) -> Any:
    """The plain dicts and lists of a frozen value (for the functions that take a section's mapping)."""
    if isinstance(value, Mapping):
        return {key: thawed(item) for key, item in value.items()}
    if isinstance(value, tuple):
        return [thawed(item) for item in value]
    return value


class Section:
    """What every section has: built from its part of the config, and given back as plain values."""

    @classmethod
    def of(cls, part: Mapping | None):
        part = part or {}
        section = cls(**{f.name: frozen(part.get(f.name)) for f in fields(cls)})
        object.__setattr__(section, "_given", frozenset(part))  # the keys the config holds (a key left out reads as None)
        return section

    def as_dict(self) -> dict[str, Any]:
        """The section as the config wrote it, defaults filled (plain dicts and lists; only the keys it holds)."""
        given = getattr(self, "_given", None)
        return {f.name: thawed(getattr(self, f.name)) for f in fields(self) if given is None or f.name in given}


@dataclass(frozen=True)
class RunSettings(Section):
    name: str
    results_dir: str
    work_dir: str
    engine_threads: int
    span_months: int
    measures_span_months: int | None


@dataclass(frozen=True)
class SampleSettings(Section):
    start: str
    end: str


@dataclass(frozen=True)
class MarketSettings(Section):
    """``market:`` (a profile's name or path), or ``markets:`` (several profiles and a reporting currency)."""

    market: str | None
    markets: Mapping[str, Any] | None

    @classmethod
    def of(cls, config: Mapping | None):
        config = config or {}
        return cls(market=config.get("market"), markets=frozen(config.get("markets")))

    def as_config(self, inputs: "InputSettings") -> dict[str, Any]:
        """``market:`` or ``markets:`` with the inputs (a market set reads its securities' codes from a file)."""
        return {**inputs.as_config(), "market": self.market, "markets": thawed(self.markets)}


@dataclass(frozen=True)
class InputSettings(Section):
    """Where each input is (``inputs:``), which of the user's columns is which (``columns:``) and how the files are written (``formats:``)."""

    files: Mapping[str, str | None]
    characteristics: tuple[Mapping[str, Any], ...]
    columns: Mapping[str, Mapping[str, str]]
    formats: Mapping[str, Mapping[str, Any]]

    @classmethod
    def of(cls, config: Mapping | None):
        config = config or {}
        inputs = dict(config.get("inputs") or {})
        characteristics = inputs.pop("characteristics", None) or ()
        return cls(files=frozen(inputs), characteristics=frozen(characteristics),
                   columns=frozen(config.get("columns") or {}), formats=frozen(config.get("formats") or {}))

    def path(self, kind: str) -> str | None:
        return self.files.get(kind)

    def as_config(self) -> dict[str, Any]:
        """The three sections as the config wrote them (for the readers that take a config's ``inputs``, ``columns`` and ``formats``)."""
        return {"inputs": {**thawed(self.files), "characteristics": thawed(self.characteristics)},
                "columns": thawed(self.columns), "formats": thawed(self.formats)}


@dataclass(frozen=True)
class DailySettings(Section):
    duplicates: str
    bad_range: str
    unparseable: str
    split_check: bool


@dataclass(frozen=True)
class CleanSettings(Section):
    nonpositive: bool
    outside_session: bool
    duplicates: bool
    unparseable: str
    venues: tuple[str, ...] | None
    corrections: Mapping[str, str] | None
    conditions: Mapping[str, str] | None
    same_timestamp: str
    outside_quotes: bool
    quote_lag_seconds: float
    unquoted_trades: str
    outliers: Mapping[str, Any] | None
    quotes: Mapping[str, Any]


@dataclass(frozen=True)
class BarSettings(Section):
    signing: str
    quote_lag_seconds: float
    horizon_minutes: float
    past_close: str
    lambda_interval_minutes: float
    realized_variance: Mapping[str, Any]


@dataclass(frozen=True)
class MeasureSettings(Section):
    """The selected measures, in the config's order, each with its options as written."""

    selected: Mapping[str, Mapping[str, Any]]

    @classmethod
    def of(cls, part: Mapping | None):
        return cls(selected=frozen({name: options or {} for name, options in (part or {}).items()}))

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(self.selected)

    def as_dict(self) -> dict[str, Any]:
        return thawed(self.selected)


@dataclass(frozen=True)
class PanelSettings(Section):
    return_source: str
    log: tuple[str, ...]
    winsorize: Mapping[str, Any]
    standardize: tuple[str, ...]


@dataclass(frozen=True)
class ModelSettings(Section):
    lags: int
    stars: bool
    sorts: tuple[Mapping[str, Any], ...]
    factor: Mapping[str, Any] | None
    validation: Mapping[str, Any] | None
    regressions: tuple[Mapping[str, Any], ...]


@dataclass(frozen=True)
class FactorSettings(Section):
    aggregate: Mapping[str, Any] | None
    betas: Mapping[str, Any] | None
    acharya_pedersen: Mapping[str, Any] | None
    commonality: Mapping[str, Any] | None


@dataclass(frozen=True)
class StudySettings(Section):
    in_report: bool
    draws: int
    seed: int
    blend_max_missing: float
    measures: tuple[str, ...] | None
    spread_column: str
    fallback_spread: str
    volatility: str
    min_days: int
    trades_per_day_when_unknown: float
    overnight_share: float
    bins: int
    spread_vol_edges: tuple[float, ...] | None
    intensity_edges: tuple[float, ...] | None
    min_cell: int


@dataclass(frozen=True)
class ReportSettings(Section):
    figures: bool
    digits: int
    labels: Mapping[str, str]
    currency: str | None
    captions: Mapping[str, str]


@dataclass(frozen=True)
class Settings:
    """Every section of one validated config; ``config`` is that config, read-only, for what hashes or
    records the run as a whole (the run-id, the manifest, the replication files)."""

    run: RunSettings
    sample: SampleSettings
    market: MarketSettings
    inputs: InputSettings
    daily: DailySettings
    clean: CleanSettings
    bars: BarSettings
    measures: MeasureSettings
    panel: PanelSettings
    models: ModelSettings
    factors: FactorSettings
    study: StudySettings
    report: ReportSettings
    config: Mapping[str, Any]

    def as_config(self) -> dict[str, Any]:
        """The validated config as plain dicts and lists (for what records the run as a whole)."""
        return thawed(self.config)


SECTIONS = {
    "run": RunSettings, "sample": SampleSettings, "daily": DailySettings, "clean": CleanSettings,
    "bars": BarSettings, "measures": MeasureSettings, "panel": PanelSettings, "models": ModelSettings,
    "factors": FactorSettings, "study": StudySettings, "report": ReportSettings,
}


def for_job(config: Mapping[str, Any] | Settings, job) -> dict[str, Any]:
    """The sections a job declares (its keyword parameters named after a section), from a config or
    its settings: ``run_panel(monthly, daily, out, **for_job(config, run_panel))``."""
    import inspect

    settings = settings_of(config)
    names = {f.name for f in fields(Settings)}
    return {name: getattr(settings, name) for name in inspect.signature(job).parameters if name in names}


def settings_of(config: Mapping[str, Any]) -> Settings:
    """The typed settings of a config the schema has validated and filled (``liqpanel.config.validate_config``)."""
    if isinstance(config, Settings):
        return config
    parts = {name: cls.of(config.get(name)) for name, cls in SECTIONS.items()}
    return Settings(**parts, market=MarketSettings.of(config), inputs=InputSettings.of(config), config=frozen(config))
