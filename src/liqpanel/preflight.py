"""Checks a run's config and inputs before any work starts, listing every problem.

``preflight(config)`` runs on the config as written (before defaults are
filled) and returns a list of :class:`Problem`: every schema error, every
input file that is missing or does not open, every mapped column the file
lacks, every column a table needs and will not have, dates that do not parse
on a sample of rows, a market profile that does not exist, measures whose
daily columns the inputs cannot provide, model and sort variables the panel
will not hold, measure options of the wrong type, results and work folders
that cannot be written. A sample window the data does not cover gives a
warning (``Problem.level == "warning"``), not an error.

It is cheap: files are opened for their header only (the Parquet schema, the
first line of a CSV); dates are parsed on the first rows; the date range
comes from Parquet statistics or a scan of the date column alone. Nothing is
created or deleted: a folder is tested by writing and removing a temporary
file in it (or, when it does not exist yet, in its nearest existing parent).

Checks of one input file are the functions in :data:`FILE_CHECKS`, each
``check(source: InputSource) -> list[Problem]``; :func:`check_date_sample`
is the one that parses dates on a sample.
"""

from __future__ import annotations

import copy
import gzip
import os
import re
import tempfile
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Callable

import jsonschema

from liqpanel.errors import LiqpanelError

SAMPLE_ROWS = 1000  # rows whose dates are parsed by the date-sample check
SAMPLE_NUMBERS = {"daily": ("open", "high", "low", "close", "volume"), "returns": ("ret",)}  # parsed there too

# our columns each input table needs (a timestamp is checked on its own: ts, or date and time)
REQUIRED: dict[str, tuple[str, ...]] = {
    "trades": ("security", "price", "size"),
    "quotes": ("security", "bid", "ask"),
    "daily": ("security", "date", "open", "high", "low", "close", "volume"),
    "returns": ("security", "month", "ret"),
    "factors": ("month",),
    "adjustments": ("security", "date"),
    "truth": ("security", "month"),
    "securities": ("security", "market"),
    "fx": ("date", "currency", "rate"),
}
# the column of each input that holds its dates
DATE_COLUMN = {"trades": "date", "quotes": "date", "daily": "date", "returns": "month", "factors": "month",
               "adjustments": "date", "truth": "month", "securities": None, "fx": "date"}
# the daily columns the workflow adds whatever the source
DERIVED_DAILY = {"month", "dollar_volume", "n_trades", "ret", "mkt_ret", "from_previous_month", "limit_day"}
PANEL_KEYS = {"security", "month", "n_days", "ret_next"}


@dataclass(frozen=True)
class Problem:
    """One thing wrong: where (a file or a config key), what, and the column concerned."""

    where: str
    message: str
    column: str | None = None
    level: str = "error"

    def __str__(self) -> str:
        prefix = "warning: " if self.level == "warning" else ""
        return f"{prefix}{self.where}: {self.message}"


@dataclass
class InputSource:
    """One input as the config names it: its key, files, mapping and formats."""

    key: str  # trades, quotes, daily, ... or characteristics[<name>]
    table: str  # which table contract: trades, quotes, daily, returns, factors, adjustments, truth, characteristics
    path: str
    mapping: dict[str, str] = field(default_factory=dict)
    formats: dict[str, Any] = field(default_factory=dict)
    config_key: str = ""  # where the mapping lives, e.g. columns.daily
    date_column: str | None = None
    timezone: str = "UTC"  # the market's, for timestamps without an offset
    required: tuple[str, ...] = ()
    numbers: tuple[str, ...] = ()  # our numeric columns whose values the date-sample check also parses
    values: bool = True  # False: rows that do not parse are dropped and counted later (daily: unparseable: drop)
    files: list[str] = field(default_factory=list)
    headers: dict[str, list[str]] = field(default_factory=dict)  # file -> the user's column names

    def ours(self, theirs: str) -> str:
        return self.mapping.get(theirs, theirs)

    def layout(self):
        """This input as the input contract describes it (``liqpanel.ingest.Layout``)."""
        from liqpanel import ingest

        return ingest.layout_from(self.table, self.path, self.mapping, self.formats)

    def theirs(self, ours: str) -> str:
        """The user's name of our column ``ours`` (itself when not mapped)."""
        return self.layout().theirs(ours)

    def named(self, ours: str) -> str:
        """The user's column name with ours in parentheses when they differ."""
        return self.layout().label(ours)


# ---------------------------------------------------------------- files


def _is_parquet(path: str) -> bool:
    return path.lower().endswith((".parquet", ".pq"))


def _is_csv(path: str) -> bool:
    return path.lower().endswith((".csv", ".csv.gz", ".csv.zst", ".txt", ".txt.gz"))


def _first_line(path: str) -> str:
    lower = path.lower()
    if lower.endswith(".gz"):
        with gzip.open(path, "rt", encoding="utf-8", errors="replace", newline="") as fh:
            return fh.readline()
    if lower.endswith(".zst"):
        import polars as pl

        frame = pl.read_csv(path, n_rows=0, has_header=False, infer_schema_length=0)
        return ",".join(str(v) for v in frame.columns)
    with open(path, encoding="utf-8", errors="replace", newline="") as fh:
        return fh.readline()


def read_header(path: str, separator: str = ",") -> list[str]:
    """The column names of a Parquet or CSV file, reading only its schema or first line.

    Raises LiqpanelError (with the reason) when the file does not open.
    """
    if _is_parquet(path):
        import pyarrow.parquet as pq

        try:
            return list(pq.read_schema(path).names)
        except Exception as exc:  # pyarrow raises several kinds for a damaged file
            raise LiqpanelError(f"does not open as Parquet: {str(exc).splitlines()[0]}") from None
    if _is_csv(path):
        if os.path.getsize(path) == 0:
            raise LiqpanelError("the file is empty; expected a header row naming the columns")
        try:
            line = _first_line(path)
        except (OSError, EOFError, UnicodeError) as exc:
            raise LiqpanelError(f"does not open as CSV: {exc}") from None
        line = line.rstrip("\r\n")
        if not line.strip():
            raise LiqpanelError("the first line is empty; expected a header row naming the columns")
        return [name.strip().strip('"') for name in line.split(separator)]
    raise LiqpanelError("unsupported file type; expected .parquet, .pq, .csv, .csv.gz, .csv.zst, .txt or .txt.gz")


def _files(path: str) -> list[str]:
    import glob

    files = sorted(glob.glob(path)) if any(ch in path for ch in "*?[") else [path]
    return [f for f in files if os.path.isfile(f)]


def check_files(source: InputSource) -> list[Problem]:
    """Every file exists and opens; remembers each file's header."""
    source.files = _files(source.path)
    if not source.files:
        what = "no file matches the pattern" if any(ch in source.path for ch in "*?[") else "no such file"
        return [Problem(source.path, f"{what} (inputs.{source.key} in the config)")]
    problems = []
    for file in source.files:
        try:
            source.headers[file] = read_header(file, source.formats.get("separator") or ",")
        except LiqpanelError as exc:
            problems.append(Problem(file, str(exc)))
    return problems


def check_mapped_columns(source: InputSource) -> list[Problem]:
    """Every user column named in the mapping is in the file."""
    problems = []
    for file, names in source.headers.items():
        for theirs, ours in source.mapping.items():
            if theirs not in names:
                problems.append(Problem(
                    file, f"{source.config_key} maps column '{theirs}' (to our '{ours}') but the file has no such "
                    f"column; its columns are {names}", column=theirs,
                ))
    return problems


def check_required_columns(source: InputSource) -> list[Problem]:
    """Every column the table needs will exist after the mapping."""
    problems = []
    for file, names in source.headers.items():
        have = {source.ours(n) for n in names}
        needed = list(source.required)
        if source.table in ("trades", "quotes") and "ts" not in have:
            needed += ["date", "time"]
        if source.table == "adjustments" and not have & {"split_ratio", "dividend"}:
            needed.append("split_ratio' or 'dividend")
        missing = [c for c in needed if c not in have]
        if missing:
            listed = ", ".join(f"'{c}'" for c in missing)
            problems.append(Problem(
                file, f"the {source.table} table needs column{'s' if len(missing) > 1 else ''} {listed}, which the "
                f"file lacks; its columns are {names}; map yours under {source.config_key}", column=missing[0],
            ))
    return problems


def _date_expr(dtype, source: "InputSource"):
    """The parsed date of a column ``_date`` of type ``dtype``, as the input contract reads it (liqpanel.ingest)."""
    from liqpanel import ingest

    parsed, _ = ingest.date("_date", dtype, source.layout(), source.path, months=source.date_column == "month")
    return parsed


def _head(source: InputSource, file: str, columns: list[str]):
    """The first :data:`SAMPLE_ROWS` rows of the user's ``columns``; the input's missing-value tokens read as missing."""
    import polars as pl

    if _is_parquet(file):
        return pl.scan_parquet(file).select(columns).head(SAMPLE_ROWS).collect()
    missing = source.formats.get("missing")
    missing = [missing] if isinstance(missing, str) else [str(m) for m in missing or []]
    return pl.read_csv(file, columns=columns, n_rows=SAMPLE_ROWS, separator=source.formats.get("separator") or ",",
                       infer_schema_length=SAMPLE_ROWS, try_parse_dates=False, null_values=missing or None)


def check_date_sample(source: InputSource) -> list[Problem]:
    """The dates (and numbers) of the first rows of every file parse as the input contract reads them.

    Trade and quote timestamps are parsed here; every other input goes
    through ``liqpanel.ingest.sample_check``, once its mapping and required
    columns are in place (otherwise those checks have named the problem).
    """
    from liqpanel import ingest

    if source.date_column is None:
        return []
    if source.table in ("trades", "quotes"):
        problems = []
        for file, names in source.headers.items():
            have = {source.ours(n): n for n in names}
            if "ts" in have or "time" in have:
                problems += _timestamp_sample(source, file, have)
        return problems
    if not source.headers or check_mapped_columns(source) or check_required_columns(source):
        return []
    fmt = {k: v for k, v in source.formats.items() if v is not None}
    if source.table == "characteristics":
        fmt["date_column"] = source.date_column
    problems = []
    for message in ingest.sample_check(source.table, source.path, source.mapping, fmt, rows=SAMPLE_ROWS,
                                       numbers=source.numbers, values=source.values):
        named = re.match(r"file (.+?): (.*)$", message, flags=re.S)
        problems.append(Problem(named.group(1), named.group(2)) if named else Problem(source.path, message))
    return problems


def _timestamp_sample(source: InputSource, file: str, have: dict[str, str]) -> list[Problem]:
    """Trades and quotes: the timestamp (``ts``, or ``date`` and ``time``) parses on the first rows."""
    import polars as pl

    from liqpanel.readers import _timestamp

    columns = [c for c in ("ts", "date", "time") if c in have]
    if "ts" not in columns and len(columns) < 2:
        return []  # named by check_required_columns
    try:
        frame = _head(source, file, [have[c] for c in columns]).rename({have[c]: c for c in columns})
    except (pl.exceptions.PolarsError, OSError) as exc:
        return [Problem(file, f"cannot read the file (damaged or truncated?): {str(exc).splitlines()[0]}")]
    try:
        ts, bad, raw, _ = _timestamp(frame.schema, source.timezone, file, source.layout())
    except LiqpanelError as exc:
        return [Problem(file, str(exc), column=have[columns[0]])]
    checked = frame.with_row_index("_row").select("_row", raw.cast(pl.String).alias("_raw"),
                                                 (bad | (raw.is_not_null() & ts.is_null())).alias("_bad"))
    bad_rows = checked.filter(pl.col("_bad"))
    if not bad_rows.height:
        return []
    row, value = bad_rows["_row"][0] + 1, bad_rows["_raw"][0]
    where = f"data row {row} (line {row + 1})" if not _is_parquet(file) else f"row {row}"
    named = source.named("ts") if "ts" in columns else f"{source.named('date')} and {source.named('time')}"
    return [Problem(file, f"{where}: column {named} has {value!r}, expected a timestamp, all with or all without "
                    f"a zone ({bad_rows.height} of the first {frame.height} rows do not parse)",
                    column=have[columns[0]])]


# The checks run on every input file, in order. The date-sample check is one entry.
FILE_CHECKS: list[Callable[[InputSource], list[Problem]]] = [
    check_mapped_columns,
    check_required_columns,
    check_date_sample,
]


# ---------------------------------------------------------------- config


def schema_problems(config: Any, source: str) -> list[Problem]:
    """Every place the config breaks the schema (not only the first)."""
    from liqpanel.config import _message, load_schema

    if not isinstance(config, dict):
        return [Problem(source, "the config must be a mapping of keys to values")]
    validator = jsonschema.Draft202012Validator(load_schema())
    errors = sorted(validator.iter_errors(config), key=lambda e: list(map(str, e.absolute_path)))
    return [Problem(source, _empty_message(e) or _message(e)) for e in errors]


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
                timezone = zones.pop() if len(zones) == 1 else "UTC"  # as liqpanel.marketset.load_markets
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
    from liqpanel.contracts import DAILY
    from liqpanel.intraday import daily_columns as intraday_columns

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
    positive finite numbers (``liqpanel.marketset``, which reads both files the same way at run time)."""
    from liqpanel import marketset
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


# ---------------------------------------------------------------- dates covered


SCAN_LIMIT_BYTES = 512 * 1024 * 1024  # larger CSV files are not scanned for their date range


def _parquet_range(file: str, column: str):
    """(first, last) date of a Parquet column from the row groups' statistics, or None when they lack them."""
    import datetime as dt

    import pyarrow.parquet as pq

    meta = pq.ParquetFile(file).metadata
    index = meta.schema.to_arrow_schema().get_field_index(column)
    if index < 0 or meta.num_row_groups == 0:
        return None
    lows, highs = [], []
    for group in range(meta.num_row_groups):
        stats = meta.row_group(group).column(index).statistics
        if stats is None or not stats.has_min_max or not isinstance(stats.min, dt.date):
            return None
        lows.append(stats.min)
        highs.append(stats.max)
    day = (lambda v: v.date() if isinstance(v, dt.datetime) else v)
    return day(min(lows)), day(max(highs))


def date_range(source: InputSource):
    """(first, last) date of an input's files, or None when unknown.

    Parquet: the row groups' statistics (else a scan of the column); CSV: a
    scan of the date column alone, for files up to :data:`SCAN_LIMIT_BYTES`.
    Trades and quotes with one timestamp column use it.
    """
    lows, highs = [], []
    for file, names in source.headers.items():
        have = {source.ours(n): n for n in names}
        ours = "ts" if source.table in ("trades", "quotes") and "ts" in have else source.date_column
        if ours not in have:
            return None
        theirs = have[ours]
        span = _parquet_range(file, theirs) if _is_parquet(file) else None
        if span is None:
            if not _is_parquet(file) and os.path.getsize(file) > SCAN_LIMIT_BYTES:
                return None
            span = _scanned_range(source, file, theirs, ours)
        if span is None:
            return None
        lows.append(span[0])
        highs.append(span[1])
    return (min(lows), max(highs)) if lows else None


def _scanned_range(source: InputSource, file: str, theirs: str, ours: str):
    import polars as pl

    if _is_parquet(file):
        lf = pl.scan_parquet(file).select(pl.col(theirs).alias("_date"))
    else:
        lf = pl.scan_csv(file, separator=source.formats.get("separator") or ",", try_parse_dates=False,
                         infer_schema_length=SAMPLE_ROWS).select(pl.col(theirs).alias("_date"))
    try:
        dtype = lf.collect_schema()["_date"]
        if ours == "ts" and dtype == pl.String:
            parsed = pl.col("_date").str.strip_chars().str.slice(0, 10).str.to_date("%Y-%m-%d", strict=False)
        else:
            parsed = _date_expr(dtype, source)
        if ours == "ts" and isinstance(dtype, pl.Datetime):
            parsed = pl.col("_date").dt.date()
        row = lf.select(parsed.min().alias("lo"), parsed.max().alias("hi")).collect().row(0)
    except pl.exceptions.PolarsError:
        return None
    return None if row[0] is None else (row[0], row[1])


def window_warnings(config: dict, sources: list[InputSource]) -> list[Problem]:
    """Warn when the data of trades, quotes, the daily file or returns does not cover the sample."""
    sample = config.get("sample") or {}
    start, end = sample.get("start"), sample.get("end")
    if not (isinstance(start, str) and isinstance(end, str)):
        return []
    warnings = []
    for source in sources:
        if source.key not in ("trades", "quotes", "daily", "returns"):
            continue
        span = date_range(source)
        if span is None:
            continue
        first, last = span[0].strftime("%Y-%m"), span[1].strftime("%Y-%m")
        if first > start or last < end:
            warnings.append(Problem(
                source.path, f"its dates run from {span[0]} to {span[1]} but the sample is {start} to {end}; "
                "months outside them will have no " + ("returns" if source.key == "returns" else "estimates"),
                column=source.theirs(source.date_column),
                level="warning",
            ))
    return warnings


# ---------------------------------------------------------------- all together


def preflight(config: Any, *, source: str = "config", target: str = "all") -> list[Problem]:
    """Every problem of ``config`` (as written) and its inputs; warnings have ``level == "warning"``.

    ``target`` is what will run: ``all`` (the whole workflow) or ``study``
    (the estimator study alone, which fits no model: the panel and model
    settings are not checked, and a measure whose inputs are missing, whose
    values will all be missing, is a warning).
    """
    from liqpanel.config import _fill_defaults, load_schema

    problems = schema_problems(config, source)
    broken = bool(problems)  # a check may then meet values of the wrong kind
    if not isinstance(config, dict):
        return problems
    config = _fill_defaults(copy.deepcopy(config), load_schema())
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
