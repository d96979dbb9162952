"""The config against the schema, the inputs it names, and helpers of the checks of its sections."""

from __future__ import annotations

import jsonschema
from typing import Any

from liqpanel.core.errors import LiqpanelError
from liqpanel.preflight.problem import DATE_COLUMN, InputSource, Problem, REQUIRED, SAMPLE_NUMBERS


def schema_problems(config: Any, source: str) -> list[Problem]:
    """Every place the config breaks the schema (not only the first)."""
    from liqpanel.config import schema_message, load_schema

    if not isinstance(config, dict):
        return [Problem(source, "the config must be a mapping of keys to values")]
    validator = jsonschema.Draft202012Validator(load_schema())
    errors = sorted(validator.iter_errors(config), key=lambda e: list(map(str, e.absolute_path)))
    return [Problem(source, _empty_message(e) or schema_message(e)) for e in errors]


def _empty_message(error: jsonschema.ValidationError) -> str | None:
    """A key written with nothing after its colon (every line under it commented out, say)."""
    if error.validator != "type" or error.instance is not None or not error.absolute_path:
        return None
    where = ".".join(str(p) for p in error.absolute_path)
    return f"{where} is empty (nothing after the colon, or every line under it commented out); " \
        f"expected {error.validator_value}: fill it in or remove the key"


def input_sources(config: dict) -> list[InputSource]:
    """Every input the config names, with its mapping and formats."""
    inputs, columns, formats = (_dict(config.get(k)) for k in ("inputs", "columns", "formats"))
    timezone = "UTC"
    markets = _dict(config.get("markets"))
    if isinstance(config.get("market"), str) or markets:
        from liqpanel.config import load_market

        try:
            if markets:
                zones = {load_market(str(p))["timezone"] for p in _dict(markets.get("profiles")).values()}
                timezone = zones.pop() if len(zones) == 1 else "UTC"  # as liqpanel.markets.several.load_markets
            else:
                timezone = load_market(config["market"])["timezone"]
        except LiqpanelError:
            pass  # named by market_problems
    sources = []
    for key in ("trades", "quotes", "daily", "returns", "factors", "adjustments", "truth", "securities", "fx"):
        path = inputs.get(key)
        if isinstance(path, str) and path:
            mapping = _mapping(columns.get(key))
            if key == "securities" and isinstance(markets.get("column"), str):  # the user's market-code column
                mapping = {**{k: v for k, v in mapping.items() if v != "market"}, markets["column"]: "market"}
            sources.append(InputSource(
                key=key, table=key, path=path, mapping=mapping,
                formats=_dict(formats.get(key)), config_key=f"columns.{key}", date_column=DATE_COLUMN[key],
                required=REQUIRED[key], timezone=timezone, numbers=SAMPLE_NUMBERS.get(key, ()),
                values=not _drops_unparseable(config, key),
            ))
    entries = inputs.get("characteristics")
    for index, entry in enumerate(entries if isinstance(entries, list) else []):
        if not isinstance(entry, dict) or not isinstance(entry.get("path"), str):
            continue
        name = entry.get("name", index)
        date_column = entry.get("date_column", "date")
        variables = [v for v in entry.get("variables") or [] if isinstance(v, str)]
        sources.append(InputSource(
            key=f"characteristics[{name}]", table="characteristics", path=entry["path"],
            mapping=_mapping(entry.get("columns")), formats=_dict(entry.get("format")),
            config_key=f"inputs.characteristics[{name}].columns", date_column=date_column,
            required=("security", date_column, *variables), numbers=tuple(variables),
        ))
    return sources


def _drops_unparseable(config: dict, key: str) -> bool:
    """Whether the config drops (and counts) the rows of this input that do not parse, instead of stopping."""
    return key == "daily" and _dict(config.get("daily")).get("unparseable") == "drop"


def _dict(value: Any) -> dict:
    return dict(value) if isinstance(value, dict) else {}


def _mapping(value: Any) -> dict[str, str]:
    """A `columns:` mapping, its entries of the wrong kind left out (the schema check names them)."""
    return {k: v for k, v in _dict(value).items() if isinstance(k, str) and isinstance(v, str)}


def _type_name(default: Any) -> str:
    return {bool: "true or false", int: "a whole number", float: "a number", str: "text", dict: "a mapping",
            list: "a list"}.get(type(default), type(default).__name__)


def _fits(value: Any, default: Any) -> bool:
    if default is None:
        return True
    if isinstance(default, bool):
        return isinstance(value, bool)
    if isinstance(default, int):
        return isinstance(value, int) and not isinstance(value, bool)
    if isinstance(default, float):
        return isinstance(value, (int, float)) and not isinstance(value, bool)
    return isinstance(value, type(default))
