"""A column's values converted: numbers, dates and months in the file's formats, and the first bad value or impossible return found."""

from __future__ import annotations

import re

import polars as pl

from liqpanel.core.errors import InputError
from liqpanel.ingest.layout import AMBIGUOUS_DATE, Layout, RETURN_COLUMNS, error


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
