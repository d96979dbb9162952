"""Where an input is and how it is written: the ``Layout`` built from the config, and errors that name the file, the user's column, the row and the value."""

from __future__ import annotations

from dataclasses import dataclass, field

from liqpanel.core.errors import InputError


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
