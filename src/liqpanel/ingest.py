"""One way in for every input file: trades, quotes, daily, returns,
characteristics, factors, adjustments and truth.

Each input is described by a ``Layout``: where it is, how the user's columns
map to ours (``columns:``), and how its values are written (``formats:``):

- ``date_format`` (strftime, e.g. ``"%Y%m%d"`` or ``"%d/%m/%Y"``). Without
  it dates are recognised as dates or datetimes of the file, ISO text
  ``YYYY-MM-DD`` (a time after it is ignored), or ``YYYYMMDD`` as text or as
  an integer. A number is never read as a count of days since 1970. Text
  such as ``03/04/2021``, whose day and month order cannot be told, is
  refused with the file, column, row and value until a format is given.
  Month columns (returns, factors) also accept ``YYYY-MM`` and ``YYYYMM``.
- ``time_format``: the ``time`` column of a trade or quote file, or the
  whole ``ts`` column when it is text.
- ``missing``: the text tokens read as a missing value (default ``""``,
  ``NA``, ``N/A``, ``NaN``, ``nan``, ``null``, ``NULL``, ``.``).
- ``separator``: of a CSV file (default ``,``).
- ``returns_in``: ``decimal`` (0.012, the default) or ``percent`` (1.2) for
  the return columns (``ret``, ``delist_ret``, ``mkt_ret``); percent values
  are divided by 100 as they are read. A simple return below -1 (a loss of
  more than everything) cannot be, so one stops the run naming the row: the
  usual sign of a file in percent read as decimals.

CSV columns are read as text and converted by the declared schema of the
table (numbers as numbers whatever the first rows hold), so a file whose
first rows hold whole numbers reads the same as any other. A value present
that does not convert is flagged on its row (``_bad`` names our column,
``_value`` holds the text); a number that is not finite (NaN, +-inf)
becomes missing and is flagged in ``_nonfinite``. Errors name the file, the
user's own column (ours in parentheses), the row and an example value.
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass, field
from pathlib import Path

import polars as pl

from liqpanel.errors import InputError

DEFAULT_MISSING = ("", "NA", "N/A", "NaN", "nan", "null", "NULL", ".")
SCALAR_INPUTS = ("trades", "quotes", "daily", "returns", "factors", "adjustments", "truth")
PARQUET = (".parquet", ".pq")
CSV = (".csv", ".csv.gz", ".csv.zst", ".txt", ".txt.gz")
AMBIGUOUS_DATE = r"^\s*\d{1,2}[/.\-]\d{1,2}[/.\-]\d{2,4}\s*$"
HELPERS = ("_file", "_row", "_bad", "_value", "_nonfinite")
RETURN_COLUMNS = ("ret", "delist_ret", "mkt_ret")  # simple returns: -1 at the lowest


@dataclass(frozen=True)
class Layout:
    """Where an input is and how it is written: mapping (theirs -> ours) and formats."""

    kind: str
    path: str
    mapping: dict[str, str] = field(default_factory=dict)
    date_format: str | None = None
    time_format: str | None = None
    missing: tuple[str, ...] = DEFAULT_MISSING
    separator: str = ","
    returns_in: str = "decimal"

    @property
    def config_key(self) -> str:
        """Where the user sets this input's formats."""
        if self.kind.startswith("characteristics"):
            return f"`format:` of {self.kind}"
        return f"`formats.{self.kind}`"

    def theirs(self, ours: str) -> str:
        """The user's name of our column (ours when not mapped)."""
        for user, mine in self.mapping.items():
            if mine == ours:
                return user
        return ours

    def label(self, ours: str) -> str:
        """'LastPx' (close) when mapped, else 'close'."""
        user = self.theirs(ours)
        return f"'{user}' ({ours})" if user != ours else f"'{ours}'"


def layout_of(config: dict, kind: str, path: str | None = None) -> Layout:
    """The layout of a scalar input (``inputs.<kind>``) from ``columns.<kind>`` and ``formats.<kind>``."""
    fmt = (config.get("formats") or {}).get(kind) or {}
    return layout_from(kind, path or config["inputs"][kind], (config.get("columns") or {}).get(kind) or {}, fmt)


def characteristics_layout(entry: dict) -> Layout:
    """The layout of one entry of ``inputs.characteristics`` (its own ``columns:`` and ``format:``)."""
    return layout_from(f"characteristics '{entry['name']}'", entry["path"], entry.get("columns") or {}, entry.get("format") or {})


def layout_from(kind: str, path: str, mapping: dict | None, fmt: dict | None) -> Layout:
    """A layout from a ``columns:`` mapping and a ``formats:`` entry (either may be None)."""
    mapping, fmt = mapping or {}, fmt or {}
    missing = fmt.get("missing")
    return Layout(
        kind=kind, path=str(path), mapping=dict(mapping), date_format=fmt.get("date_format"),
        time_format=fmt.get("time_format"), missing=tuple(DEFAULT_MISSING if missing is None else missing),
        separator=fmt.get("separator") or ",", returns_in=fmt.get("returns_in") or "decimal",
    )


def error(layout: Layout, message: str, *, file: str | None = None, column: str | None = None,
          row: int | None = None, value=None) -> InputError:
    """An InputError naming the file, the user's column (ours in parentheses), the data row and the value."""
    where = []
    if column is not None:
        where.append(f"column {layout.label(column)}")
    if row is not None:
        csv = not (file or layout.path).lower().endswith(PARQUET)
        where.append(f"data row {row}" + (f" (line {row + 1} of the CSV)" if csv else ""))
    if value is not None:
        where.append(f"value {value!r}")
    text = ", ".join(where) + (": " if where else "") + message
    return InputError(text, path=file or layout.path)


def list_files(path: str | Path) -> list[str]:
    """The files a path or glob names, sorted; InputError when there are none."""
    import glob

    path = str(path)
    files = sorted(glob.glob(path)) if any(ch in path for ch in "*?[") else [path]
    if not files or not all(os.path.isfile(f) for f in files):
        raise InputError("no such file (check `inputs:` in the config)", path=path)
    return files


def scan_file(file: str, layout: Layout, n_rows: int | None = None, *, numbers: list[str] = ()) -> pl.LazyFrame:
    """One file as stored (CSV columns all text, except ``numbers``, ours, read as floats), renamed to
    our names; schema problems raise at once."""
    lf = open_file(file, layout, n_rows, numbers=[layout.theirs(c) for c in numbers])
    names = schema_of(lf, file).names()
    for theirs in layout.mapping:
        if theirs not in names:
            raise InputError(
                f"named in the `columns:` mapping of the {layout.kind}, but the file has no such column; "
                f"its columns are {names}",
                path=file, column=theirs,
            )
    return lf.rename(layout.mapping, strict=False) if layout.mapping else lf


def open_file(file: str, layout: Layout, n_rows: int | None = None, *, numbers: list[str] = ()) -> pl.LazyFrame:
    """One file as stored, not renamed and not yet opened: a scan whose schema has not been asked
    for, so that Polars can still number rows inside the Parquet reader and skip row groups
    (``scan_file`` checks the file first)."""
    lower = file.lower()
    if lower.endswith(PARQUET):
        lf = pl.scan_parquet(file, n_rows=n_rows)
    elif lower.endswith(CSV):
        if os.path.getsize(file) == 0:
            raise InputError("the file is empty; expected a header row naming the columns", path=file)
        lf = pl.scan_csv(
            file, separator=layout.separator, infer_schema=False, null_values=list(layout.missing),
            try_parse_dates=False, n_rows=n_rows, truncate_ragged_lines=False,
            schema_overrides={c: pl.Float64 for c in numbers} or None,
        )
    else:
        raise InputError(f"unsupported file type; expected one of {', '.join(PARQUET + CSV)}", path=file)
    return lf


def schema_of(lf: pl.LazyFrame, file: str) -> pl.Schema:
    try:
        return lf.collect_schema()
    except (pl.exceptions.PolarsError, OSError) as exc:
        raise InputError(f"cannot read the file: {_first_line(exc)}", path=file) from None


def collect(lf: pl.LazyFrame, file: str) -> pl.DataFrame:
    """Collect a frame read from ``file``; a damaged file (corrupt page, truncated gzip) names the file."""
    try:
        return lf.collect()
    except (pl.exceptions.PolarsError, OSError) as exc:
        raise InputError(f"cannot read the file (damaged or truncated?): {_first_line(exc)}", path=file) from None


def damaged(paths: list[str], formats: dict, exc: Exception) -> InputError:
    """The error for a read that failed part-way: names the first file that cannot be read to its end."""
    for kind, path in zip(("input",) * len(paths), paths):
        for file in list_files(path):
            layout = Layout(kind=kind, path=file, separator=(formats.get(kind) or {}).get("separator") or ",")
            try:
                scan_file(file, layout).collect()
            except InputError as found:
                return found
            except (pl.exceptions.PolarsError, OSError) as inner:
                return InputError(f"cannot read the file (damaged or truncated?): {_first_line(inner)}", path=file)
    return InputError(f"cannot read the inputs {', '.join(paths)}: {_first_line(exc)}")


def _first_line(exc: Exception) -> str:
    lines = [line for line in str(exc).splitlines() if line.strip()]
    return lines[0] if lines else type(exc).__name__


def require(schema: pl.Schema, columns, layout: Layout, file: str, table: str) -> None:
    """Stop naming the first required column (ours, and how to map it) that the file lacks."""
    for column in columns:
        if column not in schema:
            raise InputError(
                f"the {table} needs a column '{column}' but the file has {sorted(schema.names())}; "
                f"map your column to it under `columns:` in the config",
                path=file,
            )


def _as_float(name: str, dtype: pl.DataType, layout: Layout, file: str) -> pl.Expr:
    """A numeric column as Float64 (text stripped and converted; what does not convert is null)."""
    raw = pl.col(name)
    if dtype.is_numeric():
        return raw.cast(pl.Float64)
    if dtype == pl.String:
        return raw.str.strip_chars().cast(pl.Float64, strict=False)
    if dtype == pl.Null:
        return pl.lit(None, dtype=pl.Float64)
    raise error(layout, f"expected numbers, found values of type {dtype}", file=file, column=name)


def number(name: str, dtype: pl.DataType, layout: Layout, file: str) -> tuple[pl.Expr, pl.Expr, pl.Expr]:
    """(Float64 value with non-finite values missing, unparseable flag, non-finite flag) of a numeric column."""
    value = _as_float(name, dtype, layout, file)
    raw = pl.col(name)
    if dtype == pl.String:
        unparseable = raw.is_not_null() & (raw.str.strip_chars() != "") & value.is_null()
    else:
        unparseable = pl.lit(False)
    nonfinite = value.is_not_null() & ~value.is_finite()
    return pl.when(nonfinite).then(None).otherwise(value), unparseable, nonfinite


def date(name: str, dtype: pl.DataType, layout: Layout, file: str, *, months: bool = False) -> tuple[pl.Expr, pl.Expr]:
    """(Date, unparseable flag) of a date column; ``months`` also accepts YYYY-MM and YYYYMM."""
    raw = pl.col(name)
    if dtype == pl.Date:
        return raw, pl.lit(False)
    if isinstance(dtype, pl.Datetime):
        return raw.dt.date(), pl.lit(False)
    if dtype.is_integer() or dtype.is_float():
        whole = raw.cast(pl.Float64)
        text = pl.when(whole == whole.floor()).then(whole.cast(pl.Int64).cast(pl.String))
        present = raw.is_not_null()
    elif dtype == pl.String:
        text = raw.str.strip_chars()
        present = text.is_not_null() & (text != "")
    elif dtype == pl.Null:
        return pl.lit(None, dtype=pl.Date), pl.lit(False)
    else:
        raise error(layout, f"expected dates, found values of type {dtype}", file=file, column=name)
    if layout.date_format:
        parsed = text.str.to_datetime(layout.date_format, strict=False).dt.date()
    else:
        iso = text.str.slice(0, 10)
        forms = [
            pl.when(text.str.contains(r"^\d{4}-\d{2}-\d{2}([ T].*)?$")).then(iso).str.to_date("%Y-%m-%d", strict=False),
            pl.when(text.str.contains(r"^\d{8}$")).then(text).str.to_date("%Y%m%d", strict=False),
        ]
        if months:
            forms += [
                pl.when(text.str.contains(r"^\d{4}-\d{2}$")).then(text + "-01").str.to_date("%Y-%m-%d", strict=False),
                pl.when(text.str.contains(r"^\d{6}$")).then(text + "01").str.to_date("%Y%m%d", strict=False),
            ]
        parsed = pl.coalesce(forms)
    return parsed, present & parsed.is_null()


def date_problem(value: str | None, layout: Layout) -> str:
    """What to tell a user about a date value that did not parse."""
    if value is not None and not layout.date_format and re.match(AMBIGUOUS_DATE, str(value)):
        return (f"the order of day and month in this date cannot be told; set {layout.config_key}: "
                "date_format: (e.g. \"%d/%m/%Y\" or \"%m/%d/%Y\")")
    given = f"the format {layout.date_format!r} of {layout.config_key}" if layout.date_format else (
        f"a date, YYYY-MM-DD or YYYYMMDD (or set {layout.config_key}: date_format:)")
    return f"expected {given}"


def first_bad(frame: pl.DataFrame, layout: Layout, files: list[str], *, dates: tuple[str, ...] = ("date",),
              fix: str = "") -> InputError | None:
    """An error naming the first row (by file and row) with a value that did not parse, or None."""
    bad = frame.filter(pl.col("_bad").is_not_null())
    if not bad.height:
        return None
    first = bad.sort("_file", "_row").row(0, named=True)
    column = first["_bad"]
    what = date_problem(first["_value"], layout) if column in dates else "expected a number"
    more = f" ({bad.height} rows like this)" if bad.height > 1 else ""
    return error(layout, f"{what}{more}{fix}", file=files[first["_file"]], column=column, row=first["_row"] + 1,
                 value=first["_value"])


def impossible_return(frame: pl.DataFrame, layout: Layout, files: list[str]) -> InputError | None:
    """An error naming the first row (by file and row) whose simple return is below -1, or None."""
    columns = [c for c in RETURN_COLUMNS if c in frame.columns]
    if not columns:
        return None
    below = frame.filter(pl.any_horizontal([pl.col(c) < -1.0 for c in columns]))
    if not below.height:
        return None
    first = below.sort("_file", "_row").row(0, named=True)
    column = next(c for c in columns if first[c] is not None and first[c] < -1.0)
    more = f" ({below.height} rows like this)" if below.height > 1 else ""
    hint = ("; are the returns in percent? set returns_in: percent under " + layout.config_key
            if layout.returns_in == "decimal" else "")
    return error(layout, f"a simple return below -1 (a loss of more than 100%) cannot be{more}{hint}",
                 file=files[first["_file"]], column=column, row=first["_row"] + 1, value=first[column])


@dataclass(frozen=True)
class Spec:
    """The declared schema of a small table: text keys, dates, months and numbers."""

    name: str
    text: tuple[str, ...] = ("security",)
    dates: tuple[str, ...] = ()
    months: tuple[str, ...] = ()
    numeric: tuple[str, ...] = ()
    optional_numeric: tuple[str, ...] = ()
    other_numeric: bool = False  # every other column of the file is a number too (factors)
    flags_ok: bool = False  # boolean columns stay boolean (characteristics)


def read_frame(layout: Layout, spec: Spec, *, n_rows: int | None = None) -> tuple[pl.DataFrame, list[str]]:
    """Every file of ``layout`` parsed by ``spec``; helper columns ``_file``, ``_row``, ``_bad``,
    ``_value`` and ``_nonfinite`` (our name of the first column whose number was not finite).

    Month columns hold the first day of their month. Columns the spec does
    not name are dropped unless ``other_numeric``. Each
    value is converted once; the flags are read off the converted columns.
    """
    files = list_files(layout.path)
    frames = []
    for index, file in enumerate(files):
        lf = scan_file(file, layout, n_rows)
        schema = schema_of(lf, file)
        require(schema, (*spec.text, *spec.dates, *spec.months, *spec.numeric), layout, file, spec.name)
        named = set(spec.text) | set(spec.dates) | set(spec.months)
        numbers = [*spec.numeric, *[c for c in spec.optional_numeric if c in schema]]
        if spec.other_numeric:
            numbers += [c for c in schema.names() if c not in named and c not in numbers]
        parsed, floats = _expressions(spec, numbers, schema, layout, file)
        frame = None
        typed = {c: pl.Float64 for c in floats if schema[c] == pl.String}
        if typed and file.lower().endswith(CSV):
            # numbers parsed as the file is read (less than half the time of text converted after): the
            # same values as the text converted, and a value that does not parse fails this read, which
            # then goes the way of text to find the value and name it
            typed_schema = pl.Schema({**schema, **typed})
            try:
                frame = _parse(scan_file(file, layout, n_rows, numbers=list(typed)), spec,
                               *_expressions(spec, numbers, typed_schema, layout, file), index, typed_schema)
            except (pl.exceptions.PolarsError, OSError):
                frame = None
        if frame is None:
            frame = _parse(lf, spec, parsed, floats, index, schema, file)
        frames.append(frame)
    return pl.concat(frames, how="diagonal_relaxed"), files


def _expressions(spec: Spec, numbers: list[str], schema: pl.Schema, layout: Layout,
                 file: str) -> tuple[dict[str, pl.Expr], list[str]]:
    """Each parsed column's expression (dates, months, numbers) and the numbers read as floats."""
    parsed = {c: date(c, schema[c], layout, file)[0] for c in spec.dates}
    parsed |= {c: date(c, schema[c], layout, file, months=True)[0].dt.truncate("1mo") for c in spec.months}
    floats = []
    for column in numbers:
        if schema[column] == pl.Boolean and spec.flags_ok:
            parsed[column] = pl.col(column)
        else:
            parsed[column] = _as_float(column, schema[column], layout, file)
            if column in RETURN_COLUMNS and layout.returns_in == "percent":
                parsed[column] = parsed[column] / 100.0
            floats.append(column)
    return parsed, floats


def _parse(lf: pl.LazyFrame, spec: Spec, parsed: dict[str, pl.Expr], floats: list[str], index: int,
           schema: pl.Schema, file: str | None = None) -> pl.DataFrame:
    """One file's frame with its helper columns (``read_frame``); ``file`` None: a parse error is raised as
    Polars raises it (the caller reads the file again as text), else it names the file."""
    present = {
        c: pl.col(f"_raw_{c}").is_not_null() & (pl.col(f"_raw_{c}").str.strip_chars() != "")
        if schema[c] == pl.String else pl.col(f"_raw_{c}").is_not_null()
        for c in parsed
    }
    query = (
            lf.with_row_index("_row")
            .select(
                pl.lit(index, dtype=pl.Int32).alias("_file"), pl.col("_row").cast(pl.Int64),
                *[pl.col(c).cast(pl.String).str.strip_chars().alias(c) for c in spec.text],
                *[pl.col(c).alias(f"_raw_{c}") for c in parsed],
                *[expr.alias(c) for c, expr in parsed.items()],
            )
            .with_columns(
                *[(present[c] & pl.col(c).is_null()).alias(f"_bad_{c}") for c in parsed],
                *[(pl.col(c).is_not_null() & ~pl.col(c).is_finite()).alias(f"_inf_{c}") for c in floats],
            )
            .with_columns(
                _first([(pl.col(f"_bad_{c}"), pl.lit(c)) for c in parsed]).alias("_bad"),
                _first([(pl.col(f"_bad_{c}"), pl.col(f"_raw_{c}").cast(pl.String)) for c in parsed]).alias("_value"),
                _first([(pl.col(f"_inf_{c}"), pl.lit(c)) for c in floats]).alias("_nonfinite"),
                *[pl.when(pl.col(f"_inf_{c}")).then(None).otherwise(pl.col(c)).alias(c) for c in floats],
            )
            .select(pl.exclude("^_(raw|bad|inf)_.*$"))
    )
    return query.collect() if file is None else collect(query, file)


def _first(cases: list[tuple[pl.Expr, pl.Expr]]) -> pl.Expr:
    """The value of the first case whose condition holds, else null (text)."""
    if not cases:
        return pl.lit(None, dtype=pl.String)
    return pl.coalesce([pl.when(condition).then(value) for condition, value in cases])


def check_unique(frame: pl.DataFrame, layout: Layout, files: list[str], key: tuple[str, ...]) -> None:
    """Stop naming the first row whose key (our names) repeats an earlier row's."""
    repeated = frame.sort("_file", "_row").filter(pl.struct(*key).is_duplicated())
    if repeated.height:
        first = repeated.row(0, named=True)
        same = repeated.filter(pl.all_horizontal([pl.col(c) == first[c] for c in key]))
        rows = ", ".join(str(r + 1) for r in same["_row"].head(3).to_list())
        what = ", ".join(f"{c} {first[c]}" for c in key)
        raise error(layout, f"{same.height} rows have the same {what} (data rows {rows}); each must appear once",
                    file=files[same["_file"][-1]], column=key[-1], row=same["_row"][-1] + 1, value=str(first[key[-1]]))


def read_checked(layout: Layout, spec: Spec, key: tuple[str, ...] = ()) -> pl.DataFrame:
    """A small table read whole: a value that does not parse stops the run naming file, column, row, value.

    Non-finite numbers become missing (they are counted where the table is
    used: the panel's coverage table). A file with no data rows stops too, as
    does a repeated ``key`` (our names), naming the rows.
    """
    frame, files = read_frame(layout, spec)
    problem = first_bad(frame, layout, files, dates=(*spec.dates, *spec.months)) or impossible_return(frame, layout, files)
    if problem is not None:
        raise problem
    if not frame.height:
        raise InputError(f"the {spec.name} has a header but no data rows", path=files[0])
    if key:
        check_unique(frame, layout, files, key)
    return frame.drop(HELPERS)


def sample_check(kind: str, path: str, columns: dict[str, str] | None = None, fmt: dict | None = None,
                 rows: int = 1000, *, numbers: tuple[str, ...] = (), values: bool = True) -> list[str]:
    """Cheap check of an input's first ``rows`` rows per file: it opens, its mapping and
    key columns are there, it has data rows, and its dates (and the ``numbers`` named, our
    names) parse. Returns the problems as messages, empty when there are none.

    ``kind`` is one of ``SCALAR_INPUTS`` or ``characteristics``; for the
    latter ``fmt`` may carry ``date_column`` besides the format keys. Trade
    and quote files are only opened (their rows are checked by the clean stage),
    as is every file with ``values=False`` (rows that do not parse are dropped
    and counted later, e.g. ``daily: unparseable: drop``).
    """
    fmt = dict(fmt or {})
    date_column = fmt.pop("date_column", "date")
    layout = layout_from(kind, path, columns, fmt)
    dated = {
        "daily": Spec("daily file", dates=("date",)),
        "adjustments": Spec("adjustments file", dates=("date",)),
        "returns": Spec("monthly returns file", months=("month",)),
        "factors": Spec("factor file", text=(), months=("month",)),
        "truth": Spec("truth file", months=("month",)),
        "characteristics": Spec("characteristics file", dates=(date_column,)),
    }
    problems = []
    try:
        if kind in dated and values:
            spec = dated[kind]
            spec = Spec(spec.name, text=spec.text, dates=spec.dates, months=spec.months, numeric=numbers, flags_ok=True,
                        other_numeric=kind in ("factors", "truth"))
            frame, files = read_frame(layout, spec, n_rows=rows)
            problem = first_bad(frame, layout, files, dates=(date_column, "date", "month"))
            if problem is None and kind in ("daily", "returns"):
                problem = impossible_return(frame, layout, files)
            if problem is not None:
                problems.append(str(problem))
            elif not frame.height:
                problems.append(str(InputError(f"the {spec.name} has a header but no data rows", path=files[0])))
        else:
            for file in list_files(path):
                schema_of(scan_file(file, layout, rows), file)
    except InputError as exc:
        problems.append(str(exc))
    return problems
