"""Reading any vendor's trade and quote files into our table contracts.

Accepted input: Parquet or CSV (also ``.csv.gz`` and ``.csv.zst``), one file
or a glob of many. The config's ``columns:`` mapping renames the user's
columns to ours (``liqpanel.core.contracts``). Timestamps come as one column
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

from dataclasses import dataclass, field
from typing import Callable
from pathlib import Path

import polars as pl

from liqpanel import ingest
from liqpanel.core.errors import InputError

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
    return ingest.list_files(path)


def _flag(bad: pl.Expr, column: str, raw: pl.Expr) -> tuple[pl.Expr, pl.Expr]:
    return pl.when(bad).then(pl.lit(column)), pl.when(bad).then(raw.cast(pl.String))


def _number(name: str, dtype: pl.DataType, layout: ingest.Layout, path: str) -> tuple[pl.Expr, pl.Expr, pl.Expr]:
    """(parsed Float64, bad flag, raw) for a numeric column; NaN and +-inf become missing
    (and so fall under the clean stage's rule ``missing_field``)."""
    value, bad, _ = ingest.number(name, dtype, layout, path)
    return value, bad, pl.col(name)


def _to_utc(naive: pl.Expr, timezone: str) -> pl.Expr:
    return naive.dt.replace_time_zone(timezone, ambiguous="earliest", non_existent="null").dt.convert_time_zone("UTC")


def timestamp_parts(schema: pl.Schema, timezone: str, path: str, layout: ingest.Layout) -> tuple[pl.Expr, pl.Expr, pl.Expr, str]:
    """(UTC timestamp, bad flag, raw text, how it was read)."""
    naive_note = f"naive, read in the market time zone {timezone}"
    if "ts" in schema:
        dtype, raw = schema["ts"], pl.col("ts")
        if isinstance(dtype, pl.Datetime):
            if dtype.time_zone is None:
                return _to_utc(raw.dt.cast_time_unit("us"), timezone), pl.lit(False), raw, naive_note
            note = f"zone-aware ({dtype.time_zone}), converted to UTC"
            return raw.dt.convert_time_zone("UTC").dt.cast_time_unit("us"), pl.lit(False), raw, note
        if dtype == pl.String and layout.time_format:
            text = raw.str.strip_chars()
            aware = "%z" in layout.time_format or "%#z" in layout.time_format
            parsed = text.str.to_datetime(layout.time_format, time_unit="us", strict=False)
            parsed = parsed.dt.convert_time_zone("UTC") if aware else _to_utc(parsed, timezone)
            note = f"text in the format {layout.time_format!r}" + ("" if aware else f", {naive_note}")
            return parsed, text.is_not_null() & parsed.is_null(), raw, note
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
        day, day_bad = ingest.date("date", schema["date"], layout, path)
        clock, clock_bad = _clock(schema["time"], path, layout)
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


def _clock(dtype: pl.DataType, path: str, layout: ingest.Layout) -> tuple[pl.Expr, pl.Expr]:
    raw = pl.col("time")
    if dtype == pl.Time or isinstance(dtype, pl.Duration):
        return raw, pl.lit(False)
    if dtype == pl.String:
        text = raw.str.strip_chars()
        parsed = text.str.to_time(layout.time_format, strict=False) if layout.time_format else pl.coalesce(
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
    fmt: dict | None = None,
) -> Scanned:
    """Scan every file of ``path`` into the contract of ``spec`` (``ts`` in UTC).

    Schema problems (a mapped column absent, a required column absent, a
    column of the wrong kind, an empty file) raise InputError at once, naming
    the file and the column. Row problems are flagged in ``_bad``.
    ``window`` maps a file's schema (our names, values as stored) to a
    condition that keeps at least the rows wanted, or None; it is applied
    before any conversion, so the Parquet reader skips the row groups it
    rules out (``liqpanel.core.partition.month_window``); ``_row`` still counts
    every row of the file. ``fmt`` is the input's entry of ``formats:``
    (``liqpanel.ingest``): date and time formats, missing tokens, separator.
    """
    files = list_files(path)
    layout = ingest.layout_from(spec.name, str(path), mapping, fmt)
    frames, notes = [], []
    for index, file in enumerate(files):
        lf = ingest.scan_file(file, layout)
        schema = ingest.schema_of(lf, file)
        for column in ("security", *spec.numeric):
            if column not in schema:
                raise InputError(
                    f"the {spec.name} table needs a column '{column}' but the file has {sorted(schema.names())}; "
                    "map your column to it under `columns:` in the config",
                    path=file,
                    column=column,
                )
        ts, ts_bad, ts_raw, note = timestamp_parts(schema, timezone, file, layout)
        notes.append(note)
        # a value present that gives no instant (e.g. a local time skipped by a clock change) is bad too
        ts_bad = ts_bad | (ts_raw.is_not_null() & ts.is_null())
        checks = [(ts_bad, "ts" if "ts" in schema else "date/time", ts_raw)]
        numbers = {}
        for column in (*spec.numeric, *[c for c in spec.optional_numeric if c in schema]):
            parsed, bad, raw = _number(column, schema[column], layout, file)
            numbers[column] = parsed
            checks.append((bad, column, raw))
        flags = [_flag(bad, column, raw) for bad, column, raw in checks]
        # a fresh scan: once its schema has been asked for, Polars no longer
        # numbers rows inside the reader, and then cannot skip row groups
        indexed = ingest.open_file(file, layout).with_row_index("_row")
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


def unparseable_error(
    flagged: pl.DataFrame, files: list[str], table: str, *, droppable: bool = True, mapping: dict[str, str] | None = None
) -> InputError | None:
    """An InputError naming the first row (by file and row) whose value did not parse, or None."""
    bad = flagged.filter(pl.col("_bad").is_not_null())
    if not bad.height:
        return None
    first = bad.sort("_file", "_row").row(0, named=True)
    file = files[first["_file"]]
    row = first["_row"] + 1
    where = f"data row {row} (line {row + 1} of the CSV)" if not file.lower().endswith(_PARQUET) else f"row {row}"
    column = first["_bad"]
    theirs = {ours: user for user, ours in (mapping or {}).items()}
    if column == "date/time":
        label = f"{theirs.get('date', 'date')}/{theirs.get('time', 'time')}"
    else:
        label = theirs.get(column, column)
    label = f"{label}' ({column})" if label != column else f"{column}'"
    expected = "a number"
    if column in ("ts", "date/time"):
        expected = "a timestamp, all with or all without a zone, that exists in the market's time zone"
    fix = "fix the file or map another column under `columns:`"
    if droppable:
        fix += ", or set `clean: unparseable: drop` to drop such rows under the rule 'unparseable'"
    return InputError(
        f"column '{label}, {where} of the {table} has {first['_value']!r}, expected {expected} "
        f"({bad.height} such rows); {fix}",
        path=file,
    )


def empty_table(spec: TableSpec) -> pl.LazyFrame:
    """A table of ``spec`` with no rows (used when a run has no quotes)."""
    schema = {
        "_file": pl.Int32, "_row": pl.Int64, "security": pl.String, "ts": pl.Datetime("us", "UTC"),
        **{c: pl.Float64 for c in spec.numeric}, "_bad": pl.String, "_value": pl.String,
    }
    return pl.LazyFrame(schema=schema)


def read_adjustments(path: str | Path, mapping: dict[str, str] | None, fmt: dict | None = None) -> pl.DataFrame:
    """The split and dividend file: ``security``, ``date`` (ex-date) and at least
    one of ``split_ratio`` (new shares per old share, 1 = none) and
    ``dividend`` (cash per old share, currency units, 0 = none).

    The file is small, so it is read at once and checked row by row: a value
    that does not parse stops with an error naming the file, column and row.
    """
    layout = ingest.layout_from("adjustments", str(path), mapping, fmt)
    spec = ingest.Spec("adjustments file", dates=("date",), optional_numeric=("split_ratio", "dividend"))
    frame, files = ingest.read_frame(layout, spec)
    if "split_ratio" not in frame.columns and "dividend" not in frame.columns:
        raise ingest.error(layout, "the adjustments table needs a column 'split_ratio' or 'dividend'; map yours under "
                           "`columns.adjustments`", file=files[0])
    problem = ingest.first_bad(frame, layout, files)
    if problem is not None:
        raise problem
    frame = frame.with_columns(
        *[pl.col(c).fill_null(default) if c in frame.columns else pl.lit(default).alias(c)
          for c, default in (("split_ratio", 1.0), ("dividend", 0.0))]
    )
    invalid = frame.filter(
        (pl.col("split_ratio") <= 0) | (pl.col("dividend") < 0) | pl.col("_nonfinite").is_not_null()
        | pl.col("security").is_null() | pl.col("date").is_null()
    )
    if invalid.height:
        first = invalid.row(0, named=True)
        column = next(c for c in ("security", "date", "split_ratio", "dividend") if first[c] is None) if (
            first["security"] is None or first["date"] is None) else (
            first["_nonfinite"] or ("split_ratio" if first["split_ratio"] <= 0 else "dividend"))
        raise ingest.error(
            layout, "every row needs a security and an ex-date, a positive finite split_ratio and a non-negative "
            f"finite dividend ({invalid.height} rows break this)", file=files[first["_file"]], column=column,
            row=first["_row"] + 1, value=first.get(column),
        )
    return frame.select("security", "date", "split_ratio", "dividend").sort("security", "date")
