"""The typed settings: one frozen object per config section, its fields the schema's keys.

The schema is the single source of every default (``liqpanel.config``); the
settings only carry what the validated config holds, so these checks read
both from the schema file and from the demo and daily-file configs.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest

from liqpanel.config import load_config, load_schema
from liqpanel.core.settings import SECTIONS, InputSettings, MarketSettings, settings_of

ROOT = Path(__file__).resolve().parents[1]
CONFIGS = [ROOT / "config" / "config.yaml", ROOT / "config" / "daily_example.yaml"]


def schema_section(schema: dict, name: str) -> dict:
    part = schema["properties"][name]
    if "$ref" in part:
        target = schema
        for key in part["$ref"].removeprefix("#/").split("/"):
            target = target[key]
        part = target
    return part


@pytest.mark.parametrize("name", [n for n in SECTIONS if n != "measures"])
def test_each_section_has_exactly_the_schema_keys(name):
    keys = set(schema_section(load_schema(), name)["properties"])
    assert {f.name for f in dataclasses.fields(SECTIONS[name])} == keys


def test_no_field_carries_a_default_of_its_own():
    # a default written here would be a second source beside the schema
    for cls in [*SECTIONS.values(), InputSettings, MarketSettings]:
        assert all(f.default is dataclasses.MISSING and f.default_factory is dataclasses.MISSING
                   for f in dataclasses.fields(cls)), cls.__name__


@pytest.mark.parametrize("path", CONFIGS, ids=lambda p: p.name)
def test_sections_give_back_the_validated_config(path):
    config = load_config(path)
    settings = settings_of(config)
    for name, cls in SECTIONS.items():
        if name == "factors":  # only the factors the config names
            assert settings.factors.as_dict() == {k: v for k, v in config.get("factors", {}).items() if v is not None}
        elif name in config:  # as written, defaults filled; a key without a default stays out
            assert getattr(settings, name).as_dict() == config[name], name
    assert settings.inputs.as_config() == {key: config[key] for key in ("inputs", "columns", "formats")}
    assert settings.market.market == config.get("market")
    assert settings.sample.start == config["sample"]["start"] and settings.sample.end == config["sample"]["end"]
    assert settings.measures.names == tuple(config["measures"])


def test_settings_cannot_be_changed():
    settings = settings_of(load_config(CONFIGS[0]))
    with pytest.raises(dataclasses.FrozenInstanceError):
        settings.clean.duplicates = False
    with pytest.raises(TypeError):
        settings.clean.quotes["anything"] = 1  # a read-only view
    assert isinstance(settings.models.regressions, tuple)
    with pytest.raises(TypeError):
        settings.config["sample"] = {}
