"""Checks of one input file, run in the order of ``FILE_CHECKS``: it opens, its mapped and needed columns, dates and numbers on a sample of rows."""

from __future__ import annotations

import gzip
import os
import re
from typing import Callable

from liqpanel.core.errors import LiqpanelError
from liqpanel.preflight.problem import InputSource, Problem, SAMPLE_ROWS


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

    from liqpanel.clean.reading import timestamp_parts

    columns = [c for c in ("ts", "date", "time") if c in have]
    if "ts" not in columns and len(columns) < 2:
        return []  # named by check_required_columns
    try:
        frame = _head(source, file, [have[c] for c in columns]).rename({have[c]: c for c in columns})
    except (pl.exceptions.PolarsError, OSError) as exc:
        return [Problem(file, f"cannot read the file (damaged or truncated?): {str(exc).splitlines()[0]}")]
    try:
        ts, bad, raw, _ = timestamp_parts(frame.schema, source.timezone, file, source.layout())
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
