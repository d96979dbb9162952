"""Checks of the market profile, or of several markets with their securities and exchange rates."""

from __future__ import annotations

from liqpanel.core.errors import LiqpanelError
from liqpanel.preflight.config_checks import _dict
from liqpanel.preflight.files import _files
from liqpanel.preflight.problem import Problem, SAMPLE_ROWS
from liqpanel.preflight.sections import _names


def market_problems(config: dict) -> list[Problem]:
    from liqpanel.config import load_market

    if config.get("markets"):
        return several_markets_problems(config)
    problems = []
    models = _dict(config.get("models"))
    for where, spec in [*((f"models.sorts[{s.get('name')}]", s) for s in models.get("sorts") or []
                          if isinstance(s, dict)), ("models.factor", _dict(models.get("factor")))]:
        if spec.get("breakpoints") == "per_market":
            problems.append(Problem(where, "breakpoints: per_market needs several markets (`markets:`); "
                                    "this run has one"))
    for spec in models.get("regressions") or []:
        if isinstance(spec, dict) and "market" in [*_names(spec.get("effects")), *_names(spec.get("cluster"))]:
            problems.append(Problem(f"models.regressions[{spec.get('name')}]", "market effects or clusters need "
                                    "several markets (`markets:`); this run has one"))
    if isinstance(config.get("market"), str):
        try:
            _covers_sample(load_market(config["market"]), config)
        except LiqpanelError as exc:
            problems.append(Problem("market", str(exc)))
    return problems


def _covers_sample(market: dict, config: dict) -> None:
    """A profile on an exchange's calendar: the library's calendar covers the sample (ConfigError if not)."""
    sample = config.get("sample")
    if market.get("calendar") is None or not isinstance(sample, dict) or not {"start", "end"} <= set(sample):
        return
    from liqpanel.markets import sample_span, trading_days

    try:
        span = sample_span(sample["start"], sample["end"])
    except ValueError:  # a sample month that is not a month: the schema check names it
        return
    trading_days(market, *span)


def several_markets_problems(config: dict) -> list[Problem]:
    """``markets:``: every profile loads and names a currency; the securities file gives every security a
    known code; the FX file is there when a market is not in the reporting currency and its rates are
    positive finite numbers (``liqpanel.markets.several``, which reads both files the same way at run time)."""
    from liqpanel.markets import several as marketset
    from liqpanel.config import load_market

    problems = []
    if config.get("market"):
        problems.append(Problem("market", "give either `market:` (one market) or `markets:` (several), not both"))
    spec, profiles = config["markets"], {}
    for code, name in spec["profiles"].items():
        try:
            profiles[code] = load_market(str(name))
            _covers_sample(profiles[code], config)
        except LiqpanelError as exc:
            problems.append(Problem(f"markets.profiles.{code}", str(exc)))
    reporting = spec["reporting_currency"]
    foreign = {}
    for code, profile in profiles.items():
        if not profile.get("currency"):
            problems.append(Problem(f"markets.profiles.{code}", f"the profile {spec['profiles'][code]} names no "
                                    "`currency:`; with several markets every profile needs one"))
        elif str(profile["currency"]) != str(reporting):
            foreign[code] = str(profile["currency"])
    inputs = config["inputs"]
    listing = inputs.get("securities") or inputs.get("daily")
    if not listing:
        problems.append(Problem("inputs.securities", "`markets:` needs a securities file giving each security's "
                                f"market code in the column '{spec['column']}' (or a daily file with it)"))
    elif _files(listing):
        try:  # a securities file whole; a daily file's first rows, as the other sample checks
            marketset.read_securities(config, None if inputs.get("securities") else SAMPLE_ROWS)
        except LiqpanelError as exc:
            problems.append(Problem(getattr(exc, "path", None) or listing, _message_of(exc),
                                    column=spec["column"]))
    if foreign and not inputs.get("fx"):
        listed = ", ".join(f"{code} ({currency})" for code, currency in foreign.items())
        problems.append(Problem("inputs.fx", f"markets {listed} are not in the reporting currency {reporting}; "
                                "give their exchange rates in an FX file (date, currency, rate)"))
    elif foreign and _files(inputs["fx"]):
        try:
            rates, _ = marketset.read_fx(config)
            absent = sorted(set(foreign.values()) - set(rates.get_column("currency").unique().to_list()))
            if absent:
                problems.append(Problem(inputs["fx"], f"no rate at all for currency {', '.join(absent)} "
                                        f"(markets: {', '.join(c for c, v in foreign.items() if v in absent)})"))
        except LiqpanelError as exc:
            problems.append(Problem(getattr(exc, "path", None) or inputs["fx"], _message_of(exc)))
    return problems


def _message_of(exc: LiqpanelError) -> str:
    """An error's message without the 'file <path>: ' prefix the Problem's place repeats."""
    text = str(exc)
    path = getattr(exc, "path", None)
    return text.removeprefix(f"file {path}: ") if path else text
