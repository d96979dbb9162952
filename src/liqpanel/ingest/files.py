"""An input's files opened: CSV as text or Parquet as stored, row groups outside a window skipped, a damaged file named."""

from __future__ import annotations

import os
from pathlib import Path

import polars as pl

from liqpanel.core.errors import InputError
from liqpanel.ingest.layout import CSV, Layout, PARQUET


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
