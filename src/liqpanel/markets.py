"""Market profiles: time zone, trading sessions, half days, tick size.

A profile is a small YAML file in ``liqpanel/market_profiles/`` (or any path):

    name: ...                 # free text
    timezone: Asia/Kolkata    # an IANA time-zone name
    sessions:                 # one or more [open, close] local times, in order
      - ["08:40", "11:25"]
      - ["12:55", "15:10"]    # a midday break between the two
    half_days:                # optional: local date -> early close
      "2021-11-16": "10:40"
    holidays:                 # optional: local weekdays the market is closed
      - 2021-11-17
    tick_size: 0.01           # optional price grid, currency units
    currency: ZZK             # optional currency code (ISO 4217 private use: ZZA-ZZZ)

Session bounds are inclusive (common practice: the opening and the closing
trade belong to the day). A session must close after it opens on the same
local day; sessions may not overlap. On a half day every session ends at the
early close at the latest, and sessions that would open after it are closed.

Every helper here is a polars expression over whole columns: the profile's
handful of sessions is unrolled into the expression, never a loop over rows.
"""

from __future__ import annotations

import re
import zoneinfo
from datetime import date, datetime, time, timedelta, timezone
from pathlib import Path

import polars as pl

from liqpanel.errors import ConfigError

_CLOCK = re.compile(r"^([01][0-9]|2[0-3]):([0-5][0-9])(?::([0-5][0-9]))?$")


def parse_clock(text, *, where: str) -> time:
    """'HH:MM' or 'HH:MM:SS' local clock time, or a ConfigError naming ``where``."""
    match = _CLOCK.match(str(text))
    if not match:
        raise ConfigError(f"{where}: expected a local time 'HH:MM', got {text!r}")
    hh, mm, ss = match.groups()
    return time(int(hh), int(mm), int(ss or 0))


def check_market(market: dict, path: str | Path) -> dict:
    """Validate a loaded profile; return it with parsed ``_sessions``, ``_half_days`` and ``_holidays``.

    Raises ConfigError naming the profile file, the key and what was expected.
    """
    where = f"market profile {path}"
    if not isinstance(market, dict):
        raise ConfigError(f"{where}: expected a mapping of keys to values")
    allowed = {"name", "timezone", "sessions", "half_days", "holidays", "tick_size", "currency"}
    unknown = sorted(set(market) - allowed)
    if unknown:
        raise ConfigError(f"{where}: unknown key '{unknown[0]}'; allowed keys: {', '.join(sorted(allowed))}")
    try:
        zoneinfo.ZoneInfo(str(market["timezone"]))
    except (zoneinfo.ZoneInfoNotFoundError, ValueError):
        raise ConfigError(f"{where}: timezone {market['timezone']!r} is not an IANA time-zone name") from None
    sessions = market["sessions"]
    if not isinstance(sessions, list) or not sessions:
        raise ConfigError(f"{where}: sessions: expected a list of [open, close] local times")
    parsed = []
    for k, session in enumerate(sessions):
        if not isinstance(session, (list, tuple)) or len(session) != 2:
            raise ConfigError(f"{where}: sessions[{k}]: expected [open, close], got {session!r}")
        open_ = parse_clock(session[0], where=f"{where}: sessions[{k}]")
        close = parse_clock(session[1], where=f"{where}: sessions[{k}]")
        if close <= open_:
            raise ConfigError(f"{where}: sessions[{k}]: the close {session[1]} must follow the open {session[0]}")
        if parsed and open_ <= parsed[-1][1]:
            raise ConfigError(f"{where}: sessions[{k}] opens before the previous session closes; list them in order")
        parsed.append((open_, close))
    half_days = {}
    for day, close in (market.get("half_days") or {}).items():
        try:
            key = day if isinstance(day, date) else date.fromisoformat(str(day))
        except ValueError:
            raise ConfigError(f"{where}: half_days: {day!r} is not a date 'YYYY-MM-DD'") from None
        half_days[key] = parse_clock(close, where=f"{where}: half_days[{day}]")
    holidays = _holidays(market.get("holidays"), where)
    both = sorted(set(holidays) & set(half_days))
    if both:
        raise ConfigError(f"{where}: {both[0].isoformat()} is both a holiday and a half day; keep one")
    tick = market.get("tick_size")
    if tick is not None and not (isinstance(tick, (int, float)) and tick > 0):
        raise ConfigError(f"{where}: tick_size: expected a positive number or null, got {tick!r}")
    return {**market, "_sessions": parsed, "_half_days": half_days, "_holidays": holidays}


def _holidays(listed, where: str) -> tuple[date, ...]:
    """The profile's closed days: a list of distinct ISO dates 'YYYY-MM-DD', each a weekday, sorted."""
    if listed is None:
        return ()
    if not isinstance(listed, list):
        raise ConfigError(f"{where}: holidays: expected a list of dates 'YYYY-MM-DD', got {listed!r}")
    days = []
    for k, day in enumerate(listed):
        try:
            # YAML reads an unquoted 2021-03-10 as a date already
            parsed = day if isinstance(day, date) and not isinstance(day, datetime) else date.fromisoformat(str(day))
        except ValueError:
            raise ConfigError(f"{where}: holidays[{k}]: {day!r} is not a date 'YYYY-MM-DD'") from None
        if parsed.weekday() >= 5:
            raise ConfigError(f"{where}: holidays[{k}]: {parsed.isoformat()} is a {parsed:%A}; weekends are "
                              "closed already, list only weekdays")
        days.append(parsed)
    repeated = sorted({d for d in days if days.count(d) > 1})
    if repeated:
        raise ConfigError(f"{where}: holidays: {repeated[0].isoformat()} is listed twice")
    return tuple(sorted(days))


def sessions_of(market: dict) -> list[tuple[time, time]]:
    if "_sessions" in market:
        return market["_sessions"]
    return check_market(market, market.get("name", "(given as a mapping)"))["_sessions"]


def _early_close(market: dict, day: pl.Expr) -> pl.Expr | None:
    half = market.get("_half_days")
    if half is None:
        half = check_market(market, market.get("name", "(given as a mapping)"))["_half_days"]
    if not half:
        return None
    return day.replace_strict(list(half), list(half.values()), default=None, return_dtype=pl.Time)


def session_index(market: dict, local_time: pl.Expr, day: pl.Expr) -> pl.Expr:
    """0-based index of the session holding each local time, null outside every session."""
    early = _early_close(market, day)
    index = pl.lit(None, dtype=pl.Int32)
    for k, (open_, close) in reversed(list(enumerate(sessions_of(market)))):
        inside = local_time.is_between(pl.lit(open_), pl.lit(close), closed="both")
        if early is not None:
            inside = inside & (early.is_null() | (local_time <= early))
        index = pl.when(inside).then(pl.lit(k, dtype=pl.Int32)).otherwise(index)
    return index


def session_bound(market: dict, index: pl.Expr, day: pl.Expr, which: str) -> pl.Expr:
    """UTC timestamp of the open or close (``which``) of session ``index`` on local ``day``.

    The close honours the half-day early close.
    """
    position = 0 if which == "open" else 1
    clock = pl.lit(None, dtype=pl.Time)
    for k, bounds in enumerate(sessions_of(market)):
        clock = pl.when(index == k).then(pl.lit(bounds[position])).otherwise(clock)
    early = _early_close(market, day)
    if which == "close" and early is not None:
        clock = pl.when(early.is_not_null() & (early < clock)).then(early).otherwise(clock)
    local = day.dt.combine(clock, time_unit="us")
    return local.dt.replace_time_zone(market["timezone"], ambiguous="earliest", non_existent="null").dt.convert_time_zone(
        "UTC"
    )


def local_clock(ts: pl.Expr, market: dict, span: tuple[datetime, datetime] | None = None) -> tuple[pl.Expr, pl.Expr]:
    """(local date, local time of day) of UTC timestamps in the market's time zone.

    ``span``: (first, last) UTC instants, time-zone aware, that bound every
    timestamp of the frame (a month partition's window). Within a span the
    zone changes its offset a handful of times at most (a daylight-saving
    change or none), so the local clock is integer arithmetic on the
    microseconds: UTC plus the offset in force, read from Python's
    ``zoneinfo`` at each change. Without a span, for one outside 1900-2099
    (the years over which the two time-zone engines agree) or one longer
    than a year, the table engine converts each timestamp. Both give the
    same dates and times.
    """
    offsets = _offsets_within(market["timezone"], *span) if span is not None else None
    if offsets is None:
        local = ts.dt.convert_time_zone(market["timezone"])
        return local.dt.date(), local.dt.time()
    us = ts.dt.epoch("us")
    (_, first), *changes = offsets
    offset = pl.lit(first, dtype=pl.Int64)
    for start, value in changes:
        offset = pl.when(us >= start).then(pl.lit(value, dtype=pl.Int64)).otherwise(offset)
    local = us + offset
    day = local.floordiv(_DAY_US)
    return day.cast(pl.Int32).cast(pl.Date), ((local - day * _DAY_US) * 1000).cast(pl.Time)


_DAY_US = 86_400_000_000
_EPOCH = datetime(1970, 1, 1, tzinfo=timezone.utc)
_AGREED = (datetime(1900, 1, 1, tzinfo=timezone.utc), datetime(2100, 1, 1, tzinfo=timezone.utc))


def _offsets_within(zone_name: str, first: datetime, last: datetime) -> list[tuple[int | None, int]] | None:
    """[(None, offset), (change, offset), ...] in microseconds for the UTC instants first..last.

    Each change is the first microsecond of the new offset; the zone is
    read at every day of the span and a change located by bisection (no
    zone changes its offset twice within a day). None outside 1900-2099, or
    for a span of more than a year (a stray timestamp far from the month).
    """
    if first < _AGREED[0] or last >= _AGREED[1] or last - first > timedelta(days=400):
        return None
    zone = zoneinfo.ZoneInfo(zone_name)

    def offset_at(us: int) -> int:
        return (_EPOCH + timedelta(microseconds=us)).astimezone(zone).utcoffset() // timedelta(microseconds=1)

    lo, hi = (int((t - _EPOCH) // timedelta(microseconds=1)) for t in (first, last))
    out: list[tuple[int | None, int]] = [(None, offset_at(lo))]
    t = lo
    while t < hi:  # one probe a day over a month's window: a few dozen calls
        step = min(t + _DAY_US, hi)
        if offset_at(step) != out[-1][1]:
            before, after = t, step
            while after - before > 1:
                middle = (before + after) // 2
                before, after = (middle, after) if offset_at(middle) == out[-1][1] else (before, middle)
            out.append((after, offset_at(after)))
        t = step
    return out
