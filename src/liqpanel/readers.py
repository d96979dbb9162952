"""Reading any vendor's trade and quote files into our table contracts.

Accepted input: Parquet or CSV (also ``.csv.gz`` and ``.csv.zst``), one file
or a glob of many. The config's ``columns:`` mapping renames the user's
columns to ours (``liqpanel.contracts``). Timestamps come as one column
``ts`` or as two columns ``date`` and ``time``:

- a zone-aware timestamp (a Parquet timestamp with a zone, or text with an
  offset such as ``+09:00`` or ``Z``) is converted to UTC;
- a naive timestamp is read as local time of the market's time zone
  (``timezone:`` of the market profile); the audit states which reading was
  used for each table;
- text mixing naive and offset timestamps in one column is refused, naming
  the first row whose form differs from the file's first timestamp;
- ``date`` may be a date, ISO text or a YYYYMMDD number; ``time`` a time of
  day, ``HH:MM:SS[.ffffff]`` text or a duration since midnight.

Prices and sizes may be numbers of any type (decimals included) or text of
numbers. A value present in the file that does not parse (a timestamp, a
price) is flagged on its row: the clean stage either stops with an error
naming the file, the column, the row and the value, or drops the row under
the rule ``unparseable`` (config ``clean.unparseable``). Files are only read,
never modified; each file is read on its own and the results stacked, so
files that differ in time zone or column types are each read correctly.

Every frame returned has the contract columns plus ``_file`` (index into the
list of files), ``_row`` (0-based data row within its file), ``_bad`` (the
first column whose value did not parse, else null) and ``_value`` (that
value as text).
"""

from __future__ import annotations

import glob
import os
from dataclasses import dataclass, field
from typing import Callable
from pathlib import Path

import polars as pl

from liqpanel.errors import InputError

HELPER_COLUMNS = ("_file", "_row", "_bad", "_value")
_OFFSET = r"(?:[zZ]|[+-]\d{2}(?::?\d{2})?)$"
_CSV = (".csv", ".csv.gz", ".csv.zst", ".txt", ".txt.gz")
_PARQUET = (".parquet", ".pq")


@dataclass(frozen=True)
class TableSpec:
    """What a table needs: its name, numeric and text columns, required ones."""

    name: str
    numeric: tuple[str, ...]
    text: tuple[str, ...] = ("security",)
    optional_numeric: tuple[str, ...] = ()
    optional_text: tuple[str, ...] = ()
    has_time: bool = True


TRADES_SPEC = TableSpec("trades", numeric=("price", "size"), optional_text=("venue", "cond", "correction"))
QUOTES_SPEC = TableSpec(
    "quotes", numeric=("bid", "ask"), optional_numeric=("bid_size", "ask_size"), optional_text=("venue",)
)


@dataclass
class Scanned:
    """A lazily read table and what the reader did to it."""

    frame: pl.LazyFrame
    files: list[str]
    timestamps: list[str] = field(default_factory=list)

    def describe_timestamps(self) -> str:
        """One line for the audit: how the timestamps were read."""
        kinds = sorted(set(self.timestamps))
        return "; ".join(kinds) if kinds else "no timestamps"


def list_files(path: str | Path) -> list[str]:
    """The files a path or glob names, sorted; InputError when there are none."""
    path = str(path)
    files = sorted(glob.glob(path)) if any(ch in path for ch in "*?[") else [path]
    if not files or not all(os.path.isfile(f) for f in files):
        raise InputError("no such file (check `inputs:` in the config)", path=path)
    return files


def _scan_one(path: str) -> pl.LazyFrame:
    lower = path.lower()
    if lower.endswith(_PARQUET):
        return pl.scan_parquet(path)
    if lower.endswith(_CSV):
        if os.path.getsize(path) == 0:
            raise InputError("the file is empty; expected a header row naming the columns", path=path)
        return pl.scan_csv(path, try_parse_dates=False, infer_schema_length=10_000)
    raise InputError(f"unsupported file type; expected one of {', '.join(_PARQUET + _CSV)}", path=path)


def _rename(lf: pl.LazyFrame, mapping: dict[str, str], path: str) -> pl.LazyFrame:
    try:
        names = lf.collect_schema().names()
    except pl.exceptions.PolarsError as exc:
        raise InputError(f"cannot read the file: {str(exc).splitlines()[0]}", path=path) from None
    for theirs in mapping:
        if theirs not in names:
            raise InputError(
                f"the `columns:` mapping names '{theirs}' but the file has {names}", path=path, column=theirs
            )
    return lf.rename(mapping) if mapping else lf


def _flag(bad: pl.Expr, column: str, raw: pl.Expr) -> tuple[pl.Expr, pl.Expr]:
    return pl.when(bad).then(pl.lit(column)), pl.when(bad).then(raw.cast(pl.String))


def _number(name: str, dtype: pl.DataType, path: str) -> tuple[pl.Expr, pl.Expr, pl.Expr]:
    """(parsed Float64, bad flag, raw) for a numeric column."""
    raw = pl.col(name)
    if dtype.is_numeric():
        return raw.cast(pl.Float64), pl.lit(False), raw
    if dtype == pl.String:
        parsed = raw.str.strip_chars().cast(pl.Float64, strict=False)
        return parsed, raw.is_not_null() & (raw.str.strip_chars() != "") & parsed.is_null(), raw
    raise InputError(f"expected numbers, found values of type {dtype}", path=path, column=name)


def _to_utc(naive: pl.Expr, timezone: str) -> pl.Expr:
    return naive.dt.replace_time_zone(timezone, ambiguous="earliest", non_existent="null").dt.convert_time_zone("UTC")


def _timestamp(schema: pl.Schema, timezone: str, path: str) -> tuple[pl.Expr, pl.Expr, pl.Expr, str]:
    """(UTC timestamp, bad flag, raw text, how it was read)."""
    naive_note = f"naive, read in the market time zone {timezone}"
    if "ts" in schema:
        dtype, raw = schema["ts"], pl.col("ts")
        if isinstance(dtype, pl.Datetime):
            if dtype.time_zone is None:
                return _to_utc(raw.dt.cast_time_unit("us"), timezone), pl.lit(False), raw, naive_note
            note = f"zone-aware ({dtype.time_zone}), converted to UTC"
            return raw.dt.convert_time_zone("UTC").dt.cast_time_unit("us"), pl.lit(False), raw, note
        if dtype == pl.String:
            text = raw.str.strip_chars()
            aware = text.str.contains(_OFFSET)
            first_aware = aware.drop_nulls().first()
            with_offset = pl.when(aware).then(text).str.to_datetime(time_unit="us", time_zone="UTC", strict=False)
            naive = pl.when(~aware).then(text).str.to_datetime(time_unit="us", strict=False)
            parsed = pl.when(aware).then(with_offset).otherwise(_to_utc(naive, timezone))
            mixed = text.is_not_null() & (aware != first_aware)
            bad = text.is_not_null() & (parsed.is_null() | mixed)
            note = f"text; with an offset converted to UTC, else {naive_note}"
            return pl.when(mixed).then(None).otherwise(parsed), bad, raw, note
        raise InputError(f"expected timestamps (datetime or ISO text), found {dtype}", path=path, column="ts")
    if "date" in schema and "time" in schema:
        day, day_bad = _date(schema["date"], path)
        clock, clock_bad = _clock(schema["time"], path)
        if isinstance(schema["time"], pl.Duration):
            naive = day.cast(pl.Datetime("us")) + clock
        else:
            naive = day.dt.combine(clock, time_unit="us")
        raw = pl.concat_str([pl.col("date").cast(pl.String), pl.col("time").cast(pl.String)], separator=" ")
        return _to_utc(naive, timezone), day_bad | clock_bad, raw, naive_note + " (date + time columns)"
    raise InputError(
        "needs a timestamp column 'ts' or two columns 'date' and 'time'; map yours under `columns:`",
        path=path,
        column="ts",
    )


def _date(dtype: pl.DataType, path: str) -> tuple[pl.Expr, pl.Expr]:
    raw = pl.col("date")
    if dtype == pl.Date:
        return raw, pl.lit(False)
    if isinstance(dtype, pl.Datetime):
        return raw.dt.date(), pl.lit(False)
    if dtype.is_integer():
        parsed = raw.cast(pl.String).str.to_date("%Y%m%d", strict=False)
    elif dtype == pl.String:
        text = raw.str.strip_chars()
        parsed = pl.coalesce(text.str.to_date("%Y-%m-%d", strict=False), text.str.to_date("%Y%m%d", strict=False))
    else:
        raise InputError(f"expected dates (date, YYYY-MM-DD text or YYYYMMDD), found {dtype}", path=path, column="date")
    return parsed, raw.is_not_null() & parsed.is_null()


def _clock(dtype: pl.DataType, path: str) -> tuple[pl.Expr, pl.Expr]:
    raw = pl.col("time")
    if dtype == pl.Time or isinstance(dtype, pl.Duration):
        return raw, pl.lit(False)
    if dtype == pl.String:
        text = raw.str.strip_chars()
        parsed = pl.coalesce(
            text.str.to_time("%H:%M:%S%.f", strict=False),
            text.str.to_time("%H:%M:%S", strict=False),
            text.str.to_time("%H:%M", strict=False),
        )
        return parsed, raw.is_not_null() & parsed.is_null()
    raise InputError(
        f"expected times of day (time, HH:MM:SS text or a duration since midnight), found {dtype}",
        path=path,
        column="time",
    )


def read_table(
    path: str | Path,
    mapping: dict[str, str] | None,
    spec: TableSpec,
    timezone: str,
    window: Callable[[pl.Schema], pl.Expr | None] | None = None,
) -> Scanned:
    """Scan every file of ``path`` into the contract of ``spec`` (``ts`` in UTC).

    Schema problems (a mapped column absent, a required column absent, a
    column of the wrong kind, an empty file) raise InputError at once, naming
    the file and the column. Row problems are flagged in ``_bad``.
    ``window`` maps a file's schema (our names, values as stored) to a
    condition that keeps at least the rows wanted, or None; it is applied
    before any conversion, so the Parquet reader skips the row groups it
    rules out (``liqpanel.partition.month_window``); ``_row`` still counts
    every row of the file.
    """
    files = list_files(path)
    frames, notes = [], []
    for index, file in enumerate(files):
        lf = _rename(_scan_one(file), dict(mapping or {}), file)
        schema = lf.collect_schema()
        for column in ("security", *spec.numeric):
            if column not in schema:
                raise InputError(
                    f"the {spec.name} table needs a column '{column}' but the file has {sorted(schema.names())}; "
                    "map your column to it under `columns:` in the config",
                    path=file,
                    column=column,
                )
        ts, ts_bad, ts_raw, note = _timestamp(schema, timezone, file)
        notes.append(note)
        # a value present that gives no instant (e.g. a local time skipped by a clock change) is bad too
        ts_bad = ts_bad | (ts_raw.is_not_null() & ts.is_null())
        checks = [(ts_bad, "ts" if "ts" in schema else "date/time", ts_raw)]
        numbers = {}
        for column in (*spec.numeric, *[c for c in spec.optional_numeric if c in schema]):
            parsed, bad, raw = _number(column, schema[column], file)
            numbers[column] = parsed
            checks.append((bad, column, raw))
        flags = [_flag(bad, column, raw) for bad, column, raw in checks]
        # a fresh scan: once its schema has been asked for, Polars no longer
        # numbers rows inside the reader, and then cannot skip row groups
        indexed = _scan_one(file).with_row_index("_row")
        indexed = indexed.rename(mapping) if mapping else indexed
        condition = window(schema) if window is not None else None
        if condition is not None:
            indexed = indexed.filter(condition)
        frames.append(
            indexed
            .select(
                pl.lit(index, dtype=pl.Int32).alias("_file"),
                pl.col("_row").cast(pl.Int64),
                pl.col("security").cast(pl.String),
                ts.alias("ts"),
                *[expr.alias(column) for column, expr in numbers.items()],
                *[pl.col(c).cast(pl.String) for c in spec.optional_text if c in schema],
                pl.coalesce([f[0] for f in flags]).alias("_bad"),
                pl.coalesce([f[1] for f in flags]).alias("_value"),
            )
        )
    frame = pl.concat(frames, how="diagonal_relaxed") if len(frames) > 1 else frames[0]
    return Scanned(frame=frame, files=files, timestamps=notes)


def unparseable_error(flagged: pl.DataFrame, files: list[str], table: str, *, droppable: bool = True) -> InputError | None:
    """An InputError naming the first row (by file and row) whose value did not parse, or None."""
    bad = flagged.filter(pl.col("_bad").is_not_null())
    if not bad.height:
        return None
    first = bad.sort("_file", "_row").row(0, named=True)
    file = files[first["_file"]]
    row = first["_row"] + 1
    where = f"data row {row} (line {row + 1} of the CSV)" if not file.lower().endswith(_PARQUET) else f"row {row}"
    column = first["_bad"]
    expected = "a number"
    if column in ("ts", "date/time"):
        expected = "a timestamp, all with or all without a zone, that exists in the market's time zone"
    fix = "fix the file or map another column under `columns:`"
    if droppable:
        fix += ", or set `clean: unparseable: drop` to drop such rows under the rule 'unparseable'"
    return InputError(
        f"{where} of the {table} has {first['_value']!r}, expected {expected} ({bad.height} such rows); {fix}",
        path=file,
        column=column,
    )


def empty_table(spec: TableSpec) -> pl.LazyFrame:
    """A table of ``spec`` with no rows (used when a run has no quotes)."""
    schema = {
        "_file": pl.Int32, "_row": pl.Int64, "security": pl.String, "ts": pl.Datetime("us", "UTC"),
        **{c: pl.Float64 for c in spec.numeric}, "_bad": pl.String, "_value": pl.String,
    }
    return pl.LazyFrame(schema=schema)


def read_adjustments(path: str | Path, mapping: dict[str, str] | None) -> pl.DataFrame:
    """The split and dividend file: ``security``, ``date`` (ex-date) and at least
    one of ``split_ratio`` (new shares per old share, 1 = none) and
    ``dividend`` (cash per old share, currency units, 0 = none).

    The file is small, so it is read at once and checked row by row: a value
    that does not parse stops with an error naming the file, column and row.
    """
    frames = []
    for file in list_files(path):
        lf = _rename(_scan_one(file), dict(mapping or {}), file)
        schema = lf.collect_schema()
        for column in ("security", "date"):
            if column not in schema:
                raise InputError(
                    f"the adjustments table needs a column '{column}' but the file has {sorted(schema.names())}",
                    path=file,
                    column=column,
                )
        if "split_ratio" not in schema and "dividend" not in schema:
            raise InputError(
                "the adjustments table needs a column 'split_ratio' or 'dividend'", path=file, column="split_ratio"
            )
        day, day_bad = _date(schema["date"], file)
        columns = [pl.col("security").cast(pl.String), day.alias("date")]
        checks = [(day_bad, "date", pl.col("date"))]
        for column, default in (("split_ratio", 1.0), ("dividend", 0.0)):
            if column in schema:
                parsed, bad, raw = _number(column, schema[column], file)
                columns.append(parsed.fill_null(default).alias(column))
                checks.append((bad, column, raw))
            else:
                columns.append(pl.lit(default).alias(column))
        flags = [_flag(bad, column, raw) for bad, column, raw in checks]
        frame = (
            lf.with_row_index("_row")
            .select(
                pl.lit(0, dtype=pl.Int32).alias("_file"), pl.col("_row").cast(pl.Int64), *columns,
                pl.coalesce([f[0] for f in flags]).alias("_bad"), pl.coalesce([f[1] for f in flags]).alias("_value"),
            )
            .collect()
        )
        error = unparseable_error(frame, [file], "adjustments", droppable=False)
        if error is not None:
            raise error
        invalid = frame.filter((pl.col("split_ratio") <= 0) | (pl.col("dividend") < 0))
        if invalid.height:
            raise InputError(
                f"data row {invalid['_row'][0] + 1}: split_ratio must be positive and dividend non-negative",
                path=file,
                column="split_ratio" if invalid["split_ratio"][0] <= 0 else "dividend",
            )
        frames.append(frame.drop(HELPER_COLUMNS))
    return pl.concat(frames).sort("security", "date")
