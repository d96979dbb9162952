"""Check two sets of tables against each other, cell by cell.

A referee reruns a replication package and asks: does every table match the
archived one? :func:`check_tables` takes a *reference* (an archived run
folder, or a folder of CSV tables such as ``tests/expected/``) and a
*candidate* (usually the fresh run) and compares every table they hold,
whatever tables those are.

How tables are lined up
    Tables are the CSV files (``<folder>/tables/*.csv`` in a run folder,
    ``<folder>/*.csv`` otherwise), matched by file name. Rows are matched on a
    key read from the reference table: its first column (the row labels) and
    any text columns right after it (e.g. ``model``, ``variable``); rows with
    the same key are matched in order of appearance. When the first column
    holds fractional numbers the table has no row labels and rows are matched
    by position. Columns are matched by name.

How cells are compared
    Two cells are equal when their text is equal or they are the same number.
    Numbers, plain or printed with decorations such as ``(1.962)`` or
    ``0.05**``, agree within tolerance when
    ``|candidate - reference| <= abs_tol + rel_tol * |reference|`` (common
    practice for floating-point comparison). Anything else differs: other
    numbers, other text, a value against an empty cell.

What fails
    A table is ``equal``, ``within_tolerance``, ``different`` (a cell beyond
    tolerance, a row or column missing or added), ``missing`` (in the
    reference only) or ``added`` (in the candidate only). The check fails when
    any table is different or missing, and, with ``strict``, added.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import polars as pl

from liqpanel.core.errors import InputError
from liqpanel.core.io import write_text

NUMBER_PATTERN = r"^\s*[(\[]?\s*([-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?)\s*[)\]]?\**\s*$"
FRACTION_PATTERN = r"^\s*[-+]?\d*\.\d+(?:[eE][-+]?\d+)?\s*$|^\s*[-+]?\d+[eE][-+]?\d+\s*$"
STATUSES = ("equal", "within_tolerance", "different", "missing", "added")
ROW = "__row_number"
OCCURRENCE = "__occurrence"
LABEL = "__row_label"


@dataclass(frozen=True)
class Tolerance:
    """``|candidate - reference| <= abs_tol + rel_tol * |reference|``."""

    abs_tol: float = 1e-9
    rel_tol: float = 1e-6

    def __post_init__(self) -> None:
        for name in ("abs_tol", "rel_tol"):
            value = getattr(self, name)
            if not isinstance(value, (int, float)) or not value >= 0:
                raise InputError(f"{name} must be a non-negative number, got {value!r}")


@dataclass
class TableCheck:
    """The comparison of one table."""

    name: str
    status: str
    key: list[str] = field(default_factory=list)
    rows_reference: int | None = None
    rows_candidate: int | None = None
    rows_missing: list[str] = field(default_factory=list)
    rows_added: list[str] = field(default_factory=list)
    columns_missing: list[str] = field(default_factory=list)
    columns_added: list[str] = field(default_factory=list)
    cells_compared: int = 0
    cells_equal: int = 0
    cells_within_tolerance: int = 0
    cells_different: int = 0
    largest_abs_diff: float | None = None
    largest_rel_diff: float | None = None


@dataclass
class CheckResult:
    """Every table's comparison and the cells that deviate, largest first."""

    reference: str
    candidate: str
    tolerance: Tolerance
    strict: bool
    tables: list[TableCheck]
    deviations: pl.DataFrame

    def counts(self) -> dict[str, int]:
        return {s: sum(t.status == s for t in self.tables) for s in STATUSES}

    @property
    def passed(self) -> bool:
        failing = {"different", "missing"} | ({"added"} if self.strict else set())
        return not any(t.status in failing for t in self.tables)

    def as_dict(self, max_deviations: int = 1000) -> dict[str, Any]:
        return _finite(
            {
                "reference": self.reference,
                "candidate": self.candidate,
                "abs_tol": self.tolerance.abs_tol,
                "rel_tol": self.tolerance.rel_tol,
                "strict": self.strict,
                "passed": self.passed,
                "counts": self.counts(),
                "tables": [vars(t) for t in self.tables],
                "deviations": self.deviations.head(max_deviations).to_dicts(),
                "deviations_total": self.deviations.height,
            }
        )


def _finite(obj: Any) -> Any:
    """JSON has no NaN or infinity: they become null."""
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: _finite(v) for k, v in obj.items()}
    if isinstance(obj, list):
        return [_finite(v) for v in obj]
    return obj


# ---------------------------------------------------------------- reading

def table_folder(path: str | Path) -> Path:
    """``path/tables`` for a run folder, ``path`` for a folder of CSV tables."""
    path = Path(path)
    if not path.is_dir():
        raise InputError("not a folder; expected a run folder (with tables/) or a folder of CSV tables", path=str(path))
    if (path / "tables").is_dir():
        return path / "tables"
    if any(path.glob("*.csv")):
        return path
    raise InputError("no tables here: expected a run folder with tables/*.csv or a folder of *.csv files", path=str(path))


def read_tables(path: str | Path) -> dict[str, pl.DataFrame]:
    """Every CSV table of a folder, all cells as text (empty cells as "")."""
    folder = table_folder(path)
    tables = {}
    for csv in sorted(folder.glob("*.csv")):
        try:
            frame = pl.read_csv(csv, infer_schema=False)
        except pl.exceptions.PolarsError as exc:
            raise InputError(f"cannot be read as a CSV table: {exc}", path=str(csv)) from None
        if len(set(frame.columns)) != frame.width:
            raise InputError(f"repeats a column name: {frame.columns}", path=str(csv))
        tables[csv.stem] = as_text(frame)
    return tables


def as_text(frame: pl.DataFrame) -> pl.DataFrame:
    """Every cell as text, empty cells as ""."""
    return frame.with_columns(pl.all().cast(pl.String).fill_null(""))


# ---------------------------------------------------------------- one table

def _number(col: str) -> pl.Expr:
    return pl.col(col).str.extract(NUMBER_PATTERN, 1).cast(pl.Float64, strict=False)


def row_key(frame: pl.DataFrame) -> list[str]:
    """Columns that label a table's rows: the first, and the text columns right after it.

    Empty when the first column holds fractional numbers (rows then match by position).
    """
    frame = as_text(frame)
    if frame.width == 0:
        return []
    first = frame.columns[0]
    filled = frame.filter(pl.col(first) != "")
    if filled.height and filled.select(pl.col(first).str.contains(FRACTION_PATTERN).all()).item():
        return []
    key = [first]
    for col in frame.columns[1:]:
        text = frame.filter(pl.col(col) != "")
        if text.height == 0 or text.select(_number(col).is_not_null().all()).item():
            break
        key.append(col)
    return key


def _keyed(frame: pl.DataFrame, key: list[str], present: str) -> pl.DataFrame:
    frame = frame.with_row_index(ROW)
    by = key or [ROW]
    return frame.with_columns(
        pl.int_range(pl.len()).over(by).alias(OCCURRENCE), pl.lit(True).alias(present)
    )


def _row_label(key: list[str]) -> pl.Expr:
    """``model=roll_only, variable=roll_spread``; ``row 3`` without a key.

    A key that is empty or repeated (e.g. the t-statistic rows under each
    coefficient) also gets its row number: ``variable= (row 2)``.
    """
    row = pl.format("row {}", pl.col(ROW) + 1)
    if not key:
        return row
    parts = pl.concat_str([pl.format(f"{k}={{}}", pl.col(k)) for k in key], separator=", ")
    unclear = pl.any_horizontal([pl.col(k) == "" for k in key]) | (pl.len().over(key) > 1)
    return pl.when(unclear).then(pl.format("{} ({})", parts, row)).otherwise(parts)


def _cells(joined: pl.DataFrame, columns: list[str], tol: Tolerance) -> pl.DataFrame:
    """One row per compared cell: texts, numbers, deviations, status."""
    if not columns:
        return pl.DataFrame(
            schema={"row": pl.String, "column": pl.String, "reference": pl.String, "candidate": pl.String,
                    "abs_diff": pl.Float64, "rel_diff": pl.Float64, "status": pl.String, "excess": pl.Float64}
        )
    long = pl.concat(
        [
            joined.select(
                pl.col(LABEL).alias("row"), pl.lit(c).alias("column"), pl.col(c).alias("reference"), pl.col(f"{c}__candidate").alias("candidate")
            )
            for c in columns
        ]
    )
    ref, cand = _number("reference"), _number("candidate")
    numeric = ref.is_not_null() & cand.is_not_null()
    abs_diff = pl.when(numeric).then((cand - ref).abs())
    allowed = tol.abs_tol + tol.rel_tol * ref.abs()
    return long.with_columns(
        abs_diff.alias("abs_diff"),
        pl.when(numeric).then(
            pl.when(abs_diff == 0).then(0.0).otherwise(abs_diff / ref.abs())
        ).alias("rel_diff"),
        pl.when((pl.col("reference") == pl.col("candidate")) | (numeric & (abs_diff == 0)))
        .then(pl.lit("equal"))
        .when(numeric & (abs_diff <= allowed))
        .then(pl.lit("within_tolerance"))
        .otherwise(pl.lit("different"))
        .alias("status"),
        # how far past the tolerance: below 1 within it, infinite for text that differs
        pl.when(numeric).then(abs_diff / allowed).otherwise(float("inf")).alias("excess"),
    )


def check_table(name: str, reference: pl.DataFrame, candidate: pl.DataFrame, tol: Tolerance) -> tuple[TableCheck, pl.DataFrame]:
    """Compare one table; returns its summary and its deviating cells."""
    reference, candidate = as_text(reference), as_text(candidate)
    key = row_key(reference)
    key = key if all(k in candidate.columns for k in key) else []
    ref = _keyed(reference, key, "_in_reference").with_columns(_row_label(key).alias(LABEL))
    cand = _keyed(candidate, key, "_in_candidate").with_columns(_row_label(key).alias(LABEL))
    on = [*(key or [ROW]), OCCURRENCE]
    values = [c for c in reference.columns if c in candidate.columns and c not in key]
    joined = ref.join(
        cand.select(*on, LABEL, "_in_candidate", *[pl.col(c).alias(f"{c}__candidate") for c in values]),
        on=on, how="full", coalesce=True, suffix="__other", nulls_equal=True,
    ).with_columns(pl.coalesce(LABEL, f"{LABEL}__other").alias(LABEL))
    both = joined.filter(pl.col("_in_reference") & pl.col("_in_candidate"))
    cells = _cells(both, values, tol)
    counts = cells.get_column("status").value_counts()
    count = dict(zip(counts.get_column("status").to_list(), counts.get_column("count").to_list()))
    numeric = cells.get_column("abs_diff").drop_nulls()
    check = TableCheck(
        name=name,
        status="equal",
        key=key,
        rows_reference=reference.height,
        rows_candidate=candidate.height,
        rows_missing=joined.filter(pl.col("_in_candidate").is_null()).get_column(LABEL).to_list(),
        rows_added=joined.filter(pl.col("_in_reference").is_null()).get_column(LABEL).to_list(),
        columns_missing=[c for c in reference.columns if c not in candidate.columns],
        columns_added=[c for c in candidate.columns if c not in reference.columns],
        cells_compared=cells.height,
        cells_equal=count.get("equal", 0),
        cells_within_tolerance=count.get("within_tolerance", 0),
        cells_different=count.get("different", 0),
        largest_abs_diff=numeric.max() if numeric.len() else None,
        largest_rel_diff=cells.get_column("rel_diff").drop_nulls().max() if numeric.len() else None,
    )
    if check.cells_different or check.rows_missing or check.rows_added or check.columns_missing or check.columns_added:
        check.status = "different"
    elif check.cells_within_tolerance:
        check.status = "within_tolerance"
    deviating = cells.filter(pl.col("status") != "equal").with_columns(pl.lit(name).alias("table"))
    return check, deviating


# ---------------------------------------------------------------- all tables

def check_tables(
    reference: str | Path, candidate: str | Path, tolerance: Tolerance | None = None, *, strict: bool = False
) -> CheckResult:
    """Compare every table of ``candidate`` with ``reference`` (see the module docstring)."""
    tol = tolerance or Tolerance()
    ref_tables, cand_tables = read_tables(reference), read_tables(candidate)
    checks, deviations = [], []
    for name in sorted(set(ref_tables) | set(cand_tables)):
        if name not in cand_tables:
            checks.append(TableCheck(name=name, status="missing", rows_reference=ref_tables[name].height))
        elif name not in ref_tables:
            checks.append(TableCheck(name=name, status="added", rows_candidate=cand_tables[name].height))
        else:
            check, deviating = check_table(name, ref_tables[name], cand_tables[name], tol)
            checks.append(check)
            deviations.append(deviating)
    columns = ["table", "row", "column", "reference", "candidate", "abs_diff", "rel_diff", "status"]
    found = pl.concat(deviations) if deviations else pl.DataFrame(schema={c: pl.String for c in columns} | {"excess": pl.Float64})
    found = found.sort(["excess", "table", "row", "column"], descending=[True, False, False, False]).select(
        *[pl.col(c).cast(pl.Float64) if c in ("abs_diff", "rel_diff") else pl.col(c) for c in columns]
    )
    return CheckResult(str(reference), str(candidate), tol, strict, checks, found)


# ---------------------------------------------------------------- output

_WORDS = {
    "equal": "equal", "within_tolerance": "within tolerance", "different": "DIFFERENT",
    "missing": "MISSING", "added": "added",
}


def _num(value: float | None) -> str:
    return "" if value is None else f"{value:.3g}"


def summary_text(result: CheckResult, top: int = 10) -> str:
    """What a referee reads: one line per table, the counts, the largest deviations."""
    tol = result.tolerance
    w = max([28, *(len(t.name) + 1 for t in result.tables)])  # the table names' column fits the longest
    lines = [
        f"reference  {result.reference}",
        f"candidate  {result.candidate}",
        f"tolerance  |candidate - reference| <= {tol.abs_tol:g} + {tol.rel_tol:g} x |reference|",
        "",
        f"{'table':<{w}} {'result':<17} {'rows ref/cand':>13} {'cells':>7} {'beyond tol':>10} {'largest abs dev':>16}",
    ]
    for t in result.tables:
        rows = f"{'-' if t.rows_reference is None else t.rows_reference}/{'-' if t.rows_candidate is None else t.rows_candidate}"
        lines.append(
            f"{t.name:<{w}} {_WORDS[t.status]:<17} {rows:>13} {t.cells_compared:>7} {t.cells_different:>10} "
            f"{_num(t.largest_abs_diff):>16}"
        )
        for label, items in (
            ("rows only in reference", t.rows_missing), ("rows only in candidate", t.rows_added),
            ("columns only in reference", t.columns_missing), ("columns only in candidate", t.columns_added),
        ):
            if items:
                shown = "; ".join(items[:5]) + (f"; ... ({len(items)} in all)" if len(items) > 5 else "")
                lines.append(f"    {label}: {shown}")
    counts = result.counts()
    lines += ["", f"{len(result.tables)} tables: " + ", ".join(f"{n} {_WORDS[s].lower()}" for s, n in counts.items())]
    if result.deviations.height:
        lines.append(f"largest deviations ({min(top, result.deviations.height)} of {result.deviations.height}):")
        for d in result.deviations.head(top).iter_rows(named=True):
            size = f"abs {_num(d['abs_diff'])}, rel {_num(d['rel_diff'])}" if d["abs_diff"] is not None else "text differs"
            lines.append(
                f"  {d['table']} | {d['row']} | {d['column']}: reference {d['reference'] or '(empty)'}, "
                f"candidate {d['candidate'] or '(empty)'} ({size}; {_WORDS[d['status']]})"
            )
    verdict = "PASS: every table agrees within tolerance" if result.passed else "FAIL: tables differ beyond tolerance"
    if result.passed and counts["added"]:
        verdict += f" ({counts['added']} table(s) only in the candidate)"
    lines.append(verdict)
    return "\n".join(lines) + "\n"


def write_check_report(result: CheckResult, path: str | Path) -> Path:
    """The machine-readable report (JSON)."""
    return write_text(json.dumps(result.as_dict(), indent=2) + "\n", path)
