"""Checks of the config's sections against each other and the inputs: measures, cleaning rules, panel and models, study."""

from __future__ import annotations

from typing import Any

from liqpanel.core.errors import LiqpanelError
from liqpanel.preflight.config_checks import _fits, _type_name
from liqpanel.preflight.problem import DERIVED_DAILY, InputSource, PANEL_KEYS, Problem


def measure_problems(config: dict) -> list[Problem]:
    """Unknown measures and options, and option values of the wrong type."""
    from liqpanel.measures import REGISTRY

    problems = []
    for name, options in (config.get("measures") or {}).items():
        if name not in REGISTRY:
            problems.append(Problem(f"measures.{name}", f"unknown measure '{name}'; valid names are: "
                                    f"{', '.join(sorted(REGISTRY))}"))
            continue
        measure = REGISTRY[name]
        if not isinstance(options, dict):
            continue  # null: the defaults (anything else is a schema error)
        for option, value in options.items():
            where = f"measures.{name}.{option}"
            if option == "min_days":
                if not isinstance(value, int) or isinstance(value, bool) or value < 1:
                    problems.append(Problem(where, f"measure '{name}' option 'min_days' is {value!r}; expected a "
                                            "whole number of days, 1 or more"))
            elif option not in measure.options:
                known = ", ".join(sorted({*measure.options, "min_days"}))
                problems.append(Problem(where, f"measure '{name}' has no option '{option}'; its options are: {known}"))
            elif not _fits(value, measure.options[option]):
                default = measure.options[option]
                problems.append(Problem(where, f"measure '{name}' option '{option}' is {value!r}; expected "
                                        f"{_type_name(default)} (default {default!r})"))
    return problems


def daily_columns(config: dict, sources: list[InputSource]) -> tuple[set[str], str]:
    """The columns the daily table will have, and where they come from (for messages)."""
    from liqpanel.core.contracts import DAILY
    from liqpanel.bars.intraday import daily_columns as intraday_columns

    inputs = config.get("inputs") or {}
    if inputs.get("daily"):
        daily = next((s for s in sources if s.key == "daily"), None)
        names = set(DAILY) | DERIVED_DAILY
        if daily is not None:
            for header in daily.headers.values():
                names |= {daily.ours(n) for n in header}
        return names, f"the daily file {inputs['daily']}"
    names = set(DAILY) | DERIVED_DAILY
    from liqpanel.config import shares_source

    if shares_source(config) is not None:  # the daily stage takes it from that characteristics entry
        names.add("shares_out")
    if inputs.get("quotes"):
        names |= set(intraday_columns())
    else:
        names |= {"realized_variance", "realized_variance_returns", "n_quoted", "n_signed"}
    return names, "trades without quotes" if not inputs.get("quotes") else "trades and quotes"


def measure_input_problems(config: dict, sources: list[InputSource]) -> list[Problem]:
    """Every selected measure will find its daily columns."""
    from liqpanel.measures import REGISTRY

    available, origin = daily_columns(config, sources)
    problems = []
    for name in config.get("measures") or {}:
        if name not in REGISTRY:
            continue
        missing = [c for c in REGISTRY[name].columns if c not in available]
        if missing:
            hint = "; map a column of the daily file to it under columns.daily or drop the measure"
            if not (config.get("inputs") or {}).get("daily"):
                hint = "; add `inputs: quotes:` or drop the measure"
            if "shares_out" in missing:
                hint = "; supply shares outstanding as a daily-file column mapped to 'shares_out' under columns.daily"
                if not (config.get("inputs") or {}).get("daily"):
                    hint = ("; list shares_out among the variables of an inputs.characteristics entry (the daily "
                            "stage takes each month's shares outstanding from it)")
            problems.append(Problem(f"measures.{name}", f"measure '{name}' needs daily column(s) {missing}, which "
                                    f"{origin} will not provide{hint}", column=missing[0]))
    return problems


# cleaning rules that read a column of the trade file: (setting under clean:, our column, what it holds)
CLEAN_COLUMNS = (
    ("venues", "venue", "the venue of each trade"),
    ("conditions", "cond", "the sale-condition codes"),
    ("corrections", "correction", "the correction indicator"),
)


def clean_problems(config: dict, sources: list[InputSource]) -> list[Problem]:
    """A cleaning rule set in the config whose column the trade file lacks (it would apply to nothing)."""
    clean = config.get("clean") or {}
    trades = next((s for s in sources if s.key == "trades"), None)
    if trades is None:
        return []
    problems = []
    for setting, ours, meaning in CLEAN_COLUMNS:
        if not clean.get(setting):
            continue
        for file, names in trades.headers.items():
            if ours not in {trades.ours(n) for n in names}:
                problems.append(Problem(
                    file, f"clean.{setting} is set but the trades file has no column '{ours}' ({meaning}); map yours "
                    f"to it under columns.trades or remove clean.{setting}; its columns are {names}", column=ours,
                ))
    return problems


def panel_variables(config: dict) -> set[str]:
    """The columns the panel will hold: measures' outputs, characteristics, transforms, returns."""
    from liqpanel.measures import REGISTRY

    names = set(PANEL_KEYS)
    for name in config.get("measures") or {}:
        if name in REGISTRY:
            names |= set(REGISTRY[name].outputs) | {f"{name}_n", f"{name}_reason"}
    for entry in (config.get("inputs") or {}).get("characteristics") or []:
        if isinstance(entry, dict):
            names |= {v for v in entry.get("variables") or [] if isinstance(v, str)}
    return names


def _names(value: Any) -> list[str]:
    if isinstance(value, str):
        return [value]
    return [v for v in value if isinstance(v, str)] if isinstance(value, list) else []


def panel_problems(config: dict) -> list[Problem]:
    """Transforms, regressions, sorts, the factor and the proxy check use only columns that will exist."""
    from liqpanel.measures import REGISTRY

    names = panel_variables(config)
    problems = []

    def need(where: str, variables: list[str], what: str) -> None:
        for v in variables:
            if v not in names:
                problems.append(Problem(where, f"{what} '{v}', which no input provides; the panel will hold "
                                        f"{sorted(n for n in names - {'month', 'security'} if not n.endswith(('_n', '_reason')))}",
                                        column=v))

    panel = config.get("panel") or {}
    if panel.get("return_source") == "monthly_file" and not (config.get("inputs") or {}).get("returns"):
        problems.append(Problem("panel.return_source", "is 'monthly_file' but `inputs: returns:` names no file; "
                                "name one, or set 'auto' to compound the daily returns"))
    logs = _names(panel.get("log") or [])
    need("panel.log", logs, "takes the log of")
    names |= {f"log_{v}" for v in logs}
    need("panel.winsorize.variables", _names((panel.get("winsorize") or {}).get("variables") or []), "clips")
    need("panel.standardize", _names(panel.get("standardize") or []), "standardizes")

    models = config.get("models") or {}
    for i, model in enumerate(models.get("regressions") or []):
        if not isinstance(model, dict):
            continue
        where = f"models.regressions[{model.get('name', i)}]"
        need(where, _names(model.get("regressors") or []), "uses the regressor")
        need(where, _names(model.get("dependent") or []), "uses the dependent variable")
    for i, sort in enumerate(models.get("sorts") or []):
        if not isinstance(sort, dict):
            continue
        where = f"models.sorts[{sort.get('name', i)}]"
        need(where, _names(sort.get("variable")), "sorts on")
        need(where, _names(sort.get("within")), "sorts first on")
        need(where, _names(sort.get("characteristics") or []), "reports the characteristic")
        need(where, _names(sort.get("breakpoint_universe")), "sets breakpoints with")
        weight = sort.get("weight")
        if weight == "value":
            need(where, ["market_cap"], "is value-weighted (weight: value), which needs the column")
        elif isinstance(weight, str) and weight != "equal":
            need(where, [weight], "weights by")
    factor = models.get("factor")
    if isinstance(factor, dict):
        need("models.factor", _names(factor.get("measure")), "is built on")
        need("models.factor", _names(factor.get("size", "log_size")), "forms size groups on")
        weight = factor.get("weight")
        if weight == "value":
            need("models.factor", ["market_cap"], "is value-weighted (weight: value), which needs the column")
        elif isinstance(weight, str) and weight != "equal":
            need("models.factor", [weight], "weights by")
    validation = models.get("validation")
    if isinstance(validation, dict):
        monthly = {o for n in config.get("measures") or {} if n in REGISTRY for o in REGISTRY[n].outputs}
        for key in ("benchmark", "proxies"):
            for v in _names(validation.get(key)):
                if v not in monthly:
                    problems.append(Problem(f"models.validation.{key}", f"names '{v}', which no selected measure "
                                            f"computes; the monthly table will hold {sorted(monthly)}", column=v))
    return problems


def study_problems(config: dict) -> list[Problem]:
    from liqpanel.study import check_settings

    try:
        check_settings(config.get("study"))
    except LiqpanelError as exc:
        return [Problem("study", str(exc))]
    return []
