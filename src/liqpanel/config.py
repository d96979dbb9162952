"""Load and validate a run's configuration.

The config is YAML, validated against ``src/liqpanel/workflow/schemas/config.schema.yaml``
(JSON Schema). Every mapping in the schema forbids unknown keys, so a
misspelled key stops the run with its name and the keys allowed there.
Defaults written in the schema are filled in, so the manifest records the
config as run.
"""

from __future__ import annotations

import copy
from pathlib import Path
from typing import Any

import yaml

from liqpanel.core.errors import ConfigError
from liqpanel.core.schema import (  # noqa: F401  (the places, read by the command line and the workflow)
    LOADER as _LOADER, MARKETS_DIR, PACKAGE_DIR, SCHEMA_PATH, SNAKEFILE, WORKFLOW_DIR, load_schema,
)


def _where(error: "jsonschema.ValidationError") -> str:
    parts = [str(p) for p in error.absolute_path]
    return ".".join(parts) if parts else "the top level"


def schema_message(error: "jsonschema.ValidationError") -> str:
    where = _where(error)
    if error.validator == "additionalProperties":
        allowed = sorted(error.schema.get("properties", {}))
        extra = sorted(set(error.instance) - set(allowed))
        key = extra[0] if extra else "?"
        return f"unknown key '{key}' under {where}; allowed keys there: {', '.join(allowed)}"
    if error.validator == "required":
        return f"{where}: {error.message}"
    if error.validator == "anyOf" and all(set(option) == {"required"} for option in error.validator_value):
        names = " or ".join(f"'{option['required'][0]}'" for option in error.validator_value)
        return f"{where}: needs {names}"
    if error.validator == "enum":
        return f"{where}: {error.instance!r} is not one of {error.validator_value}"
    if error.validator == "type":
        return f"{where}: expected {error.validator_value}, got {error.instance!r}"
    return f"{where}: {error.message}"


_NO_DEFAULT = object()


def _resolve(schema: dict, root: dict) -> dict:
    if "$ref" not in schema:
        return schema
    target = root
    for part in schema["$ref"].removeprefix("#/").split("/"):
        target = target[part]
    return target


def fill_defaults(instance: Any, schema: dict, root: dict | None = None) -> Any:
    """Fill ``default`` values of object properties, recursively (local ``$ref``s followed)."""
    root = schema if root is None else root
    if "$ref" in schema:
        schema = {**_resolve(schema, root), **{k: v for k, v in schema.items() if k != "$ref"}}
    if isinstance(instance, dict) and schema.get("type") == "object":
        for key, sub in schema.get("properties", {}).items():
            default = _resolve(sub, root).get("default", _NO_DEFAULT) if "default" not in sub else sub["default"]
            if key not in instance and default is not _NO_DEFAULT:
                instance[key] = copy.deepcopy(default)
            if key in instance:
                instance[key] = fill_defaults(instance[key], sub, root)
        extra = schema.get("additionalProperties")
        if isinstance(extra, dict):
            for key in instance:
                if key not in schema.get("properties", {}):
                    instance[key] = fill_defaults(instance[key], extra, root)
    elif isinstance(instance, list) and isinstance(schema.get("items"), dict):
        return [fill_defaults(item, schema["items"], root) for item in instance]
    return instance


def validate_config(config: dict, *, source: str = "config", checked_before: bool = False) -> dict:
    """Validate ``config`` against the schema; return a copy with defaults filled.

    Raises ConfigError naming the offending key and what was expected.
    ``checked_before``: the run's main process has already checked this same
    config in full (a cluster job's own process): the schema is applied and
    the defaults filled, but the measure options, models and study settings
    are not checked again, so the job does not load the measure registry,
    the models and the study for nothing.
    """
    if not isinstance(config, dict):
        raise ConfigError(f"{source}: the config must be a mapping of keys to values")
    import jsonschema  # here, not at the top: a clean or bars job loads profiles, never validates

    schema = load_schema()
    validator = jsonschema.Draft202012Validator(schema)
    errors = sorted(validator.iter_errors(config), key=lambda e: (len(e.absolute_path), list(map(str, e.absolute_path))))
    if errors:
        raise ConfigError(f"{source}: {schema_message(errors[0])}")
    filled = fill_defaults(copy.deepcopy(config), schema)
    if checked_before:
        return filled
    # measure names and options are checked against the registry
    from liqpanel.measures import get_measure, resolve_options

    for name, options in (filled.get("measures") or {}).items():
        try:
            resolve_options(get_measure(name), options)
        except ConfigError as exc:
            raise ConfigError(f"{source}: {exc}") from None
    from liqpanel.models import ModelSpec
    from liqpanel.study import check_settings

    try:
        for entry in (filled.get("models") or {}).get("regressions") or []:
            ModelSpec.from_config(entry)  # estimator, covariance and effects words, before any stage runs
        check_settings(filled.get("study"))
    except ConfigError as exc:
        raise ConfigError(f"{source}: {exc}") from None
    return filled


def read_config(path: str | Path) -> Any:
    """The config file as written (not yet validated)."""
    path = Path(path)
    try:
        with open(path) as fh:
            return yaml.safe_load(fh)
    except FileNotFoundError:
        raise ConfigError(f"config file {path} does not exist") from None
    except IsADirectoryError:
        raise ConfigError(f"config file {path} is a folder; expected a YAML file") from None
    except yaml.YAMLError as exc:
        raise ConfigError(f"config file {path} is not valid YAML: {exc}") from None


def load_config(path: str | Path) -> dict:
    return validate_config(read_config(path), source=str(path))


def market_path(name_or_path: str) -> Path:
    """The profile file of a market name (``liqpanel/market_profiles/<name>.yaml``, shipped with the package) or path."""
    path = Path(name_or_path)
    return MARKETS_DIR / f"{name_or_path}.yaml" if not path.suffix else path


def load_market(name_or_path: str) -> dict:
    """Load a market profile by name (``liqpanel/market_profiles/<name>.yaml``, shipped with the package) or path."""
    path = market_path(name_or_path)
    if not path.exists():
        known = ", ".join(sorted(p.stem for p in MARKETS_DIR.glob("*.yaml")))
        raise ConfigError(f"market profile '{name_or_path}' not found (looked for {path}); known profiles: {known}")
    try:
        with open(path) as fh:
            market = yaml.load(fh, Loader=_LOADER)
    except (yaml.YAMLError, ValueError) as exc:  # e.g. an unquoted date that is no date: 2023-02-30
        raise ConfigError(f"market profile {path}: not readable as YAML ({exc}); write dates as 'YYYY-MM-DD'") from None
    from liqpanel.markets import check_market  # imports polars: not before the engine is pinned

    return check_market(market, path)


def shares_source(config: dict) -> dict | None:
    """The first ``inputs.characteristics`` entry listing ``shares_out`` among its variables, or None.

    On the trade path it gives the daily table its shares outstanding (for
    ``turnover`` and ``liu_lm``, ``liqpanel.bars.daily_job.run_daily_month``); a daily
    file brings its own column instead.
    """
    entries = (config.get("inputs") or {}).get("characteristics") or []
    return next((c for c in entries if "shares_out" in (c.get("variables") or [])), None)
