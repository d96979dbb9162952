"""Errors a user can act on: each names the file, the column and the rule."""

from __future__ import annotations


class LiqpanelError(Exception):
    """Base class for errors shown to users without a traceback."""


class ConfigError(LiqpanelError):
    """The configuration does not match the schema or names something unknown."""


class InputError(LiqpanelError):
    """An input file is missing, unreadable, or violates a table contract."""

    def __init__(self, message: str, *, path: str | None = None, column: str | None = None):
        where = []
        if path:
            where.append(f"file {path}")
        if column:
            where.append(f"column '{column}'")
        prefix = f"{', '.join(where)}: " if where else ""
        super().__init__(prefix + message)
        self.path = path
        self.column = column
