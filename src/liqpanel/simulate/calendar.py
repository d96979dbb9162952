"""Business days, sessions in UTC and the local wall clock of the simulated markets."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import timedelta

import numpy as np
import polars as pl

from liqpanel.core.errors import ConfigError


_MICROS_PER_MINUTE = 60_000_000


def _month_start(text: str, name: str) -> np.datetime64:
    try:
        month = np.datetime64(text, "M")
    except (ValueError, TypeError):
        raise ConfigError(f"simulation parameter '{name}' = {text!r}: expected a month 'YYYY-MM'") from None
    if len(str(text)) != 7:
        raise ConfigError(f"simulation parameter '{name}' = {text!r}: expected a month 'YYYY-MM'")
    return month


def _session_minutes(session) -> tuple[int, int]:
    try:
        open_, close = session
        minutes = []
        for text in (open_, close):
            hh, mm = str(text).split(":")
            hh, mm = int(hh), int(mm)
            if not (0 <= hh < 24 and 0 <= mm < 60):
                raise ValueError
            minutes.append(60 * hh + mm)
    except (ValueError, TypeError):
        raise ConfigError(f"simulation parameter 'session' = {session!r}: expected ('HH:MM', 'HH:MM')") from None
    if minutes[1] <= minutes[0]:
        raise ConfigError(f"simulation parameter 'session' = {session!r}: the close must follow the open")
    return minutes[0], minutes[1]


@dataclass(frozen=True)
class _Calendar:
    days: np.ndarray  # datetime64[D], business days in order
    month_of_day: np.ndarray  # index into months
    months: np.ndarray  # datetime64[D], first day of each month touched

    @property
    def month_ends(self) -> np.ndarray:
        """Index of the last day of each month."""
        return np.searchsorted(self.month_of_day, np.arange(len(self.months)), side="right") - 1


def _calendar(days: np.ndarray) -> _Calendar:
    month = days.astype("datetime64[M]")
    months, month_of_day = np.unique(month, return_inverse=True)
    return _Calendar(days=days, month_of_day=month_of_day.astype(np.int64), months=months.astype("datetime64[D]"))


def _business_days(first: np.datetime64, end: np.datetime64) -> np.ndarray:
    days = np.arange(first, end, dtype="datetime64[D]")
    return days[np.is_busday(days)]


def _sessions_utc(days: np.ndarray, tz: str, sessions) -> tuple[np.ndarray, np.ndarray]:
    """UTC microseconds of each session's open on each day, shape (sessions, days), and each session's length."""
    bounds = [_session_minutes(session) for session in sessions]
    if any(later[0] <= earlier[1] for earlier, later in zip(bounds, bounds[1:])):
        raise ConfigError(f"simulation sessions {tuple(sessions)!r}: each session must open after the previous closes")
    opens, lengths = [], []
    for session, (open_min, close_min) in zip(sessions, bounds):
        local = pl.Series("open", days.astype("datetime64[us]")) + timedelta(minutes=open_min)
        try:
            utc = local.dt.replace_time_zone(tz, ambiguous="raise", non_existent="raise").dt.convert_time_zone("UTC")
        except Exception as exc:  # polars raises its own error types for unknown zones
            raise ConfigError(
                f"simulation parameters 'tz' = {tz!r}, 'session' = {tuple(session)!r}: the session open is not a "
                f"valid local time on every business day ({exc})"
            ) from None
        opens.append(utc.dt.epoch("us").to_numpy())
        lengths.append((close_min - open_min) * _MICROS_PER_MINUTE)
    return np.stack(opens), np.array(lengths, dtype=np.int64)


def _wall_clock(opens: np.ndarray, lengths: np.ndarray, day: np.ndarray, offset: np.ndarray) -> np.ndarray:
    """UTC microseconds of an ``offset`` into the day's trading time (the sessions joined, breaks left out)."""
    if len(lengths) == 1:
        return opens[0][day] + offset
    starts = np.cumsum(lengths) - lengths
    k = np.searchsorted(starts, offset, side="right") - 1
    return opens[k, day] + (offset - starts[k])
