"""The profile's clock on whole columns: the local clock of UTC timestamps, the session of a local time and its bounds."""

from __future__ import annotations

import zoneinfo
from datetime import datetime, time, timedelta, timezone

import polars as pl

from liqpanel.markets.profile import check_market


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
    """0-based index of the session holding each local time, null outside every session.

    A profile prepared by ``for_sample`` with an explicit calendar has no
    session on a closed day (a holiday or the weekend) within the sample's
    span: every time of that day is outside.
    """
    early = _early_close(market, day)
    index = pl.lit(None, dtype=pl.Int32)
    for k, (open_, close) in reversed(list(enumerate(sessions_of(market)))):
        inside = local_time.is_between(pl.lit(open_), pl.lit(close), closed="both")
        if early is not None:
            inside = inside & (early.is_null() | (local_time <= early))
        index = pl.when(inside).then(pl.lit(k, dtype=pl.Int32)).otherwise(index)
    if market.get("_open_days") is not None:
        first, last, open_days = market["_open_days"]
        closed = day.is_between(pl.lit(first), pl.lit(last)) & ~day.is_in(pl.Series(open_days, dtype=pl.Date).implode())
        index = pl.when(closed).then(pl.lit(None, dtype=pl.Int32)).otherwise(index)
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
