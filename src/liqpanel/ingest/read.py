"""A whole input read against its ``Spec``: every column converted, bad values flagged on their rows, keys checked unique."""

from __future__ import annotations

from dataclasses import dataclass

import polars as pl

from liqpanel.core.errors import InputError
from liqpanel.ingest.files import collect, list_files, require, scan_file, schema_of
from liqpanel.ingest.layout import CSV, HELPERS, Layout, RETURN_COLUMNS, error, layout_from
from liqpanel.ingest.values import _as_float, date, first_bad, impossible_return


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
        typed, text = _queries(layout, spec, file, index, n_rows)
        frame = None
        if typed is not None:
            # a value that does not parse fails this read, which then goes the way of text to find the
            # value and name it
            try:
                frame = typed.collect()
            except (pl.exceptions.PolarsError, OSError):
                frame = None
        if frame is None:
            frame = collect(text, file)
        frames.append(frame)
    return pl.concat(frames, how="diagonal_relaxed"), files


def scan_frame(layout: Layout, spec: Spec) -> tuple[pl.LazyFrame, str] | None:
    """``read_frame`` of an input of one file as a query not yet run, with the file (None: several files).

    The query parses the numbers of a CSV as the file is read, so it fails on
    a value that does not parse (``read_frame`` then reads the file as text to
    name it).
    """
    files = list_files(layout.path)
    if len(files) != 1:
        return None
    typed, text = _queries(layout, spec, files[0], 0)
    return (text if typed is None else typed), files[0]


def _queries(layout: Layout, spec: Spec, file: str, index: int,
             n_rows: int | None = None) -> tuple[pl.LazyFrame | None, pl.LazyFrame]:
    """One file's queries of ``read_frame``: numbers parsed as a CSV is read (None: not a CSV with numbers
    as text), and every column read as stored and converted after."""
    lf = scan_file(file, layout, n_rows)
    schema = schema_of(lf, file)
    require(schema, (*spec.text, *spec.dates, *spec.months, *spec.numeric), layout, file, spec.name)
    named = set(spec.text) | set(spec.dates) | set(spec.months)
    numbers = [*spec.numeric, *[c for c in spec.optional_numeric if c in schema]]
    if spec.other_numeric:
        numbers += [c for c in schema.names() if c not in named and c not in numbers]
    parsed, floats = _expressions(spec, numbers, schema, layout, file)
    typed = {c: pl.Float64 for c in floats if schema[c] == pl.String}
    query = None
    if typed and file.lower().endswith(CSV):
        # numbers parsed as the file is read (less than half the time of text converted after): the
        # same values as the text converted
        typed_schema = pl.Schema({**schema, **typed})
        query = _parse(scan_file(file, layout, n_rows, numbers=list(typed)), spec,
                       *_expressions(spec, numbers, typed_schema, layout, file), index, typed_schema)
    return query, _parse(lf, spec, parsed, floats, index, schema)


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
           schema: pl.Schema) -> pl.LazyFrame:
    """One file's query of its frame with the helper columns (``read_frame``)."""
    # a number stored as a number (or parsed as the CSV is read) always converts: only the others are checked
    checked = [c for c in parsed if not (c in floats and schema[c].is_numeric())]
    present = {
        c: pl.col(f"_raw_{c}").is_not_null() & (pl.col(f"_raw_{c}").str.strip_chars() != "")
        if schema[c] == pl.String else pl.col(f"_raw_{c}").is_not_null()
        for c in checked
    }
    return (
            lf.with_row_index("_row")
            .select(
                pl.lit(index, dtype=pl.Int32).alias("_file"), pl.col("_row").cast(pl.Int64),
                *[pl.col(c).cast(pl.String).str.strip_chars().alias(c) for c in spec.text],
                *[pl.col(c).alias(f"_raw_{c}") for c in checked],
                *[expr.alias(c) for c, expr in parsed.items()],
            )
            .with_columns(
                *[(present[c] & pl.col(c).is_null()).alias(f"_bad_{c}") for c in checked],
                *[(pl.col(c).is_not_null() & ~pl.col(c).is_finite()).alias(f"_inf_{c}") for c in floats],
            )
            .with_columns(
                _first([(pl.col(f"_bad_{c}"), pl.lit(c)) for c in checked]).alias("_bad"),
                _first([(pl.col(f"_bad_{c}"), pl.col(f"_raw_{c}").cast(pl.String)) for c in checked]).alias("_value"),
                _first([(pl.col(f"_inf_{c}"), pl.lit(c)) for c in floats]).alias("_nonfinite"),
                *[pl.when(pl.col(f"_inf_{c}")).then(None).otherwise(pl.col(c)).alias(c) for c in floats],
            )
            .select(pl.exclude("^_(raw|bad|inf)_.*$"))
    )


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
