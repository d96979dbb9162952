"""What a check returns (``Problem``), what it checks (``InputSource``) and the columns each input table needs."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any


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
