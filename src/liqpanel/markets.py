"""Market profiles: time zone, trading sessions, half days, tick size.

A profile is a small YAML file in ``liqpanel/market_profiles/`` (or any path):

    name: ...                 # free text
    timezone: Asia/Kolkata    # an IANA time-zone name
    sessions:                 # one or more [open, close] local times, in order
      - ["08:40", "11:25"]
      - ["12:55", "15:10"]    # a midday break between the two
    half_days:                # optional: local date -> early close
      "2021-11-16": "10:40"
    tick_size: 0.01           # optional price grid, currency units (or regimes, below)
    currency: ZZK             # optional currency code (ISO 4217 private use: ZZA-ZZZ)
    calendar: XHKG            # optional: an exchange's code in the exchange-calendars library
    holidays: [2021-12-24]    # optional closed days (on top of the library's, if any)
    weekend: [saturday, sunday]   # optional, the default
    price_limit: 0.10         # optional daily limit, a fraction of the previous close (or regimes)

The trading calendar. A profile with ``calendar`` or ``holidays`` has an
explicit one: its open days are the library's sessions (with ``calendar``)
or the weekdays outside ``weekend`` (without), minus ``holidays``; the
library also gives the time zone, the regular sessions with their midday
break, and the early closes of the sample's years, and the profile's own
``timezone``, ``sessions`` and ``half_days`` override them. A profile with
neither has no calendar of its own: the measures stage then takes the
market's days from the data (any date on which a security trades), the
fallback this project used before calendars. ``trading_days`` lists the
open days of an explicit calendar.

Regimes. ``tick_size`` is a number, null, or a list of regimes in date
order, each ``{from: YYYY-MM-DD, tick: 0.01}`` or ``{from: ..., bands:
[{below: 1.0, tick: 0.001}, {tick: 0.01}]}`` (a band applies to prices
below its bound; the last band has none). A regime is in force from its
date until the next one's; before the first there is no tick.
``price_limit`` is a fraction in (0, 1), null, or a list of ``{from: ...,
limit: 0.1}`` (``limit: null`` lifts it).

Session bounds are inclusive (common practice: the opening and the closing
trade belong to the day). A session must close after it opens on the same
local day; sessions may not overlap. On a half day every session ends at the
early close at the latest, and sessions that would open after it are closed.

Every helper here is a polars expression over whole columns: the profile's
handful of sessions is unrolled into the expression, never a loop over rows.
"""

from __future__ import annotations

import re
import warnings
import zoneinfo
from datetime import date, datetime, time, timedelta, timezone
from pathlib import Path

import polars as pl

from liqpanel.errors import ConfigError

PROFILE_KEYS = ("name", "timezone", "sessions", "half_days", "tick_size", "currency", "calendar", "holidays", "weekend",
                "price_limit")
WEEKDAYS = ("monday", "tuesday", "wednesday", "thursday", "friday", "saturday", "sunday")
_CLOCK = re.compile(r"^([01][0-9]|2[0-3]):([0-5][0-9])(?::([0-5][0-9]))?$")


def parse_clock(text, *, where: str) -> time:
    """'HH:MM' or 'HH:MM:SS' local clock time, or a ConfigError naming ``where``."""
    match = _CLOCK.match(str(text))
    if not match:
        raise ConfigError(f"{where}: expected a local time 'HH:MM', got {text!r}")
    hh, mm, ss = match.groups()
    return time(int(hh), int(mm), int(ss or 0))


def check_market(market: dict, path: str | Path) -> dict:
    """Validate a loaded profile; return it with parsed ``_sessions`` and ``_half_days``.

    Raises ConfigError naming the profile file, the key and what was expected.
    """
    where = f"market profile {path}"
    if not isinstance(market, dict):
        raise ConfigError(f"{where}: expected a mapping of keys to values")
    unknown = sorted(set(market) - set(PROFILE_KEYS))
    if unknown:
        raise ConfigError(f"{where}: unknown key '{unknown[0]}'; allowed keys: {', '.join(sorted(PROFILE_KEYS))}")
    library = _library_calendar(market["calendar"], where) if market.get("calendar") is not None else None
    for key in ("timezone", "sessions"):
        if key not in market and library is None:
            raise ConfigError(f"{where}: no '{key}' (give it, or name an exchange's calendar under 'calendar')")
    if library is not None:
        own = {key: market[key] for key in ("timezone", "sessions") if key in market}
        market = {**market, "timezone": str(library.tz), **own}
        if "sessions" not in own:
            market["sessions"] = _library_sessions(library, where)
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
    weekend = _weekend(market.get("weekend"), f"{where}: weekend")
    return {
        **market,
        "_sessions": parsed,
        "_half_days": half_days,
        "_holidays": _holidays(market.get("holidays"), where, weekend, half_days),
        "_weekend": weekend,
        "_tick_regimes": _tick_regimes(market.get("tick_size"), f"{where}: tick_size"),
        "_limit_regimes": _limit_regimes(market.get("price_limit"), f"{where}: price_limit"),
    }


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


# ---------------------------------------------------------------------------
# Trading calendars


def _library_calendar(code, where: str, start: date | None = None, end: date | None = None):
    """The exchange-calendars calendar of ``code`` (over ``start``..``end``, else the library's default span).

    Imported here, only for a profile that names a calendar: a clean or bars
    job of any other profile never loads the library.
    """
    with warnings.catch_warnings():  # the library's pandas idioms warn under newer pandas; its values stand
        warnings.simplefilter("ignore")
        return _library_calendar_quietly(code, where, start, end)


def _library_calendar_quietly(code, where: str, start: date | None, end: date | None):
    import exchange_calendars

    names = exchange_calendars.get_calendar_names(include_aliases=True)
    if not isinstance(code, str) or code not in names:
        close = [n for n in names if isinstance(code, str) and n.upper().startswith(code.upper()[:2])][:8]
        hint = f"; codes starting alike: {', '.join(close)}" if close else ""
        raise ConfigError(f"{where}: calendar: unknown exchange calendar {code!r} (a code of the exchange-calendars "
                          f"library, e.g. XNYS or XHKG; `python -c 'import exchange_calendars as x; "
                          f"print(x.get_calendar_names())'` lists them){hint}")
    if start is None:
        return exchange_calendars.get_calendar(code)
    try:
        return exchange_calendars.get_calendar(code, start=start.isoformat(), end=end.isoformat())
    except ValueError as exc:  # a span the library does not cover
        raise ConfigError(f"{where}: calendar: {code} does not cover {start}..{end}: {exc}") from None


def _library_days(code, where: str, start: date, end: date):
    """(open days, early closes, midday breaks) of the library's calendar ``code`` over ``start``..``end``, local."""
    library = _library_calendar(code, where, start, end)
    zone = zoneinfo.ZoneInfo(str(library.tz))
    days = [d.date() for d in library.sessions]
    closes = library.closes
    early = {d.date(): closes[d].astimezone(zone).time() for d in library.early_closes}
    starts, ends = library.break_starts, library.break_ends
    breaks = {d.date(): (starts[d].astimezone(zone).time(), ends[d].astimezone(zone).time())
              for d in library.sessions if starts[d] == starts[d]}  # NaT != NaT: no break that day
    return days, early, breaks


def _library_sessions(library, where: str) -> list[list[str]]:
    """The regular sessions of a library calendar: [open, close], or two with its midday break."""
    if library.open_offset or library.close_offset:
        raise ConfigError(f"{where}: calendar {library.name}: its session opens or closes on another day than its "
                          "date; give 'sessions' in the profile")
    open_, close = library.open_times[-1][1], library.close_times[-1][1]
    if library.break_start_times:
        pause, resume = library.break_start_times[-1][1], library.break_end_times[-1][1]
        return [[f"{open_:%H:%M}", f"{pause:%H:%M}"], [f"{resume:%H:%M}", f"{close:%H:%M}"]]
    return [[f"{open_:%H:%M}", f"{close:%H:%M}"]]


def _date(value, where: str) -> date:
    if isinstance(value, date) and not isinstance(value, datetime):
        return value
    try:
        return date.fromisoformat(str(value))
    except ValueError:
        raise ConfigError(f"{where}: {value!r} is not a date 'YYYY-MM-DD'") from None


def _holidays(listed, where: str, weekend: tuple[int, ...], half_days: dict) -> tuple[date, ...]:
    """The profile's closed days: distinct dates, none on the weekend or also a half day, sorted."""
    if listed is None:
        return ()
    if not isinstance(listed, list):
        raise ConfigError(f"{where}: holidays: expected a list of dates 'YYYY-MM-DD', got {listed!r}")
    days = [_date(day, f"{where}: holidays[{k}]") for k, day in enumerate(listed)]
    for k, day in enumerate(days):
        if day.weekday() in weekend:
            raise ConfigError(f"{where}: holidays[{k}]: {day.isoformat()} is a {day:%A}; weekends are closed already, "
                              "list only days the market would otherwise open")
    repeated = sorted({d for d in days if days.count(d) > 1})
    if repeated:
        raise ConfigError(f"{where}: holidays: {repeated[0].isoformat()} is listed twice")
    both = sorted(set(days) & set(half_days))
    if both:
        raise ConfigError(f"{where}: {both[0].isoformat()} is both a holiday and a half day; keep one")
    return tuple(sorted(days))


def _weekend(values, where: str) -> tuple[int, ...]:
    """Weekday numbers (Monday 0) of the weekend; Saturday and Sunday by default."""
    if values is None:
        return (5, 6)
    if not isinstance(values, list) or any(str(v).lower() not in WEEKDAYS for v in values):
        raise ConfigError(f"{where}: expected a list of weekday names ({', '.join(WEEKDAYS)}), got {values!r}")
    return tuple(sorted({WEEKDAYS.index(str(v).lower()) for v in values}))


def _positive(value, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not value > 0 or value != value:
        raise ConfigError(f"{where}: expected a positive number, got {value!r}")
    return float(value)


def _regimes(value, where: str, one) -> tuple[tuple[date | None, object], ...]:
    """((start, setting), ...) of a number, null or a list of ``{from: ..., ...}`` regimes in date order."""
    if value is None:
        return ()
    if not isinstance(value, list):
        return ((None, one(value, where)),)
    out: list[tuple[date | None, object]] = []
    for k, regime in enumerate(value):
        at = f"{where}[{k}]"
        if not isinstance(regime, dict) or "from" not in regime:
            raise ConfigError(f"{at}: expected a mapping with 'from: YYYY-MM-DD', got {regime!r}")
        start = _date(regime["from"], f"{at}: from")
        if out and start <= out[-1][0]:
            raise ConfigError(f"{at}: from {start} must come after the previous regime's {out[-1][0]}; list regimes "
                              "in date order")
        out.append((start, one({key: v for key, v in regime.items() if key != "from"}, at, regime=True)))
    return tuple(out)


def _tick_setting(value, where: str, regime: bool = False) -> tuple[tuple[float | None, float], ...] | None:
    """((below, tick), ...): price bands, the last without a bound; None for no tick."""
    if regime:
        keys = set(value)
        if keys not in ({"tick"}, {"bands"}):
            raise ConfigError(f"{where}: expected 'tick: <number or null>' or 'bands: [...]' beside 'from', got "
                              f"{sorted(keys)}")
        if "tick" in value:
            return None if value["tick"] is None else ((None, _positive(value["tick"], f"{where}: tick")),)
        return _bands(value["bands"], f"{where}: bands")
    return ((None, _positive(value, where)),)


def _bands(bands, where: str) -> tuple[tuple[float | None, float], ...]:
    if not isinstance(bands, list) or not bands:
        raise ConfigError(f"{where}: expected a list of {{below: <price>, tick: <number>}}, the last without 'below'")
    out: list[tuple[float | None, float]] = []
    for k, band in enumerate(bands):
        at = f"{where}[{k}]"
        last = k == len(bands) - 1
        if not isinstance(band, dict) or "tick" not in band or set(band) - {"below", "tick"}:
            raise ConfigError(f"{at}: expected {{below: <price>, tick: <number>}}, got {band!r}")
        if last != ("below" not in band):
            raise ConfigError(f"{at}: every band but the last has 'below' (the last covers every higher price)")
        below = None if last else _positive(band["below"], f"{at}: below")
        if below is not None and out and below <= out[-1][0]:
            raise ConfigError(f"{at}: below {below} overlaps the previous band (below {out[-1][0]}); bounds must "
                              "increase")
        out.append((below, _positive(band["tick"], f"{at}: tick")))
    return tuple(out)


def _limit_setting(value, where: str, regime: bool = False) -> float | None:
    if regime:
        if set(value) != {"limit"}:
            raise ConfigError(f"{where}: expected 'limit: <fraction or null>' beside 'from', got {sorted(value)}")
        value = value["limit"]
        if value is None:
            return None
        where = f"{where}: limit"
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0 < value < 1:
        raise ConfigError(f"{where}: expected a fraction of the previous close in (0, 1), e.g. 0.1, got {value!r}")
    return float(value)


def _tick_regimes(value, where: str):
    return _regimes(value, where, _tick_setting)


def _limit_regimes(value, where: str):
    return _regimes(value, where, _limit_setting)


def _checked(market: dict) -> dict:
    return market if "_sessions" in market else check_market(market, market.get("name", "(given as a mapping)"))


def has_calendar(market: dict) -> bool:
    """Whether the profile has an explicit trading calendar (``calendar`` or ``holidays``)."""
    return market.get("calendar") is not None or market.get("holidays") is not None


def trading_days(market: dict, start, end) -> pl.DataFrame:
    """The open days of an explicit calendar from ``start`` to ``end`` (dates, inclusive), sorted.

    Columns: ``date``; ``early_close`` (the local close on a half day, else
    null: the profile's ``half_days`` over the library's early closes);
    ``break_start`` and ``break_end`` (the local midday break, null on a day
    without one). Open days: the library's sessions (``calendar``) or the
    weekdays outside ``weekend``, minus ``holidays``. A profile without a
    calendar raises ConfigError: its days come from the data.
    """
    market = _checked(market)
    where = f"market profile {market.get('name', '(given as a mapping)')}"
    if not has_calendar(market):
        raise ConfigError(f"{where}: no trading calendar (neither 'calendar' nor 'holidays'); the measures take "
                          "the market's days from the data")
    start, end = _date(start, f"{where}: start"), _date(end, f"{where}: end")
    early: dict[date, time] = {}
    breaks: dict[date, tuple[time, time]] = {}
    if market.get("calendar") is not None:
        with warnings.catch_warnings():  # the library's pandas idioms warn under newer pandas; its values stand
            warnings.simplefilter("ignore")
            days, early, breaks = _library_days(market["calendar"], where, start, end)
    else:
        weekend = set(market["_weekend"])
        days = [start + timedelta(days=k) for k in range((end - start).days + 1)]
        days = [d for d in days if d.weekday() not in weekend]
        if len(market["_sessions"]) > 1:
            (_, pause), (resume, _) = market["_sessions"][0], market["_sessions"][1]
            breaks = {d: (pause, resume) for d in days}
    closed = set(market["_holidays"])
    early.update(market["_half_days"])
    days = [d for d in days if start <= d <= end and d not in closed]
    return pl.DataFrame(
        {
            "date": days,
            "early_close": [early.get(d) for d in days],
            "break_start": [breaks[d][0] if d in breaks else None for d in days],
            "break_end": [breaks[d][1] if d in breaks else None for d in days],
        },
        schema={"date": pl.Date, "early_close": pl.Time, "break_start": pl.Time, "break_end": pl.Time},
    )


def sample_span(first_month: str, last_month: str) -> tuple[date, date]:
    """The days a run's calendar covers: the sample's months (``YYYY-MM``) and the month before them.

    The month before lends its last day to the estimators that pair days
    across a month boundary.
    """
    first, last = (date.fromisoformat(f"{str(m)[:7]}-01") for m in (first_month, last_month))
    before = date(first.year - (first.month == 1), (first.month - 2) % 12 + 1, 1)
    after = date(last.year + (last.month == 12), last.month % 12 + 1, 1)
    return before, after - timedelta(days=1)


def for_sample(market: dict, start, end) -> dict:
    """The profile with the library's early closes of ``start``..``end`` among its half days (its own win),
    and, with an explicit calendar, its open days of that span (``session_index`` closes the others).

    What the clean stage needs of a profile with a calendar: the library's
    half days of the sample's years, and its closed days, on which every
    trade and quote is outside the session. A profile without ``calendar``
    or ``holidays`` is returned as it is (no library is loaded).
    """
    market = _checked(market)
    if not has_calendar(market):
        return market
    days = trading_days(market, start, end)
    library = dict(days.filter(pl.col("early_close").is_not_null()).select("date", "early_close").iter_rows())
    return {**market, "_half_days": {**library, **market["_half_days"]},
            "_open_days": (_date(start, "start"), _date(end, "end"), tuple(days.get_column("date").to_list()))}


def _regime_expr(regimes, day: pl.Expr, value) -> pl.Expr:
    """The regime in force on ``day`` as an expression: ``value(setting)`` of the latest regime started."""
    out = pl.lit(None, dtype=pl.Float64)
    for start, setting in regimes:
        expr = value(setting)
        out = expr if start is None else pl.when(day >= pl.lit(start)).then(expr).otherwise(out)
    return out


def tick_expr(market: dict, day: pl.Expr | None = None, price: pl.Expr | None = None) -> pl.Expr:
    """The tick in force on each ``day`` (default the ``date`` column) at each ``price`` (default ``close``).

    Null where no tick is in force. A price band applies to prices below its
    bound (the last band to every higher price).
    """
    market = _checked(market)
    day = pl.col("date") if day is None else day
    price = pl.col("close") if price is None else price

    def banded(bands) -> pl.Expr:
        if bands is None:
            return pl.lit(None, dtype=pl.Float64)
        out = pl.lit(bands[-1][1])
        for below, tick in reversed(bands[:-1]):
            out = pl.when(price < below).then(pl.lit(tick)).otherwise(out)
        return out

    return _regime_expr(market["_tick_regimes"], day, banded).cast(pl.Float64)


def limit_expr(market: dict, day: pl.Expr | None = None) -> pl.Expr:
    """The daily price limit (a fraction of the previous close) in force on each ``day``; null where none."""
    market = _checked(market)
    day = pl.col("date") if day is None else day
    return _regime_expr(market["_limit_regimes"], day, lambda v: pl.lit(v, dtype=pl.Float64)).cast(pl.Float64)


def tick_is_constant(market: dict) -> bool:
    """Whether the tick is one number (or none) for every day and price: no regimes, no bands."""
    regimes = _checked(market)["_tick_regimes"]
    return not regimes or (len(regimes) == 1 and regimes[0][0] is None and len(regimes[0][1]) == 1)


def latest_tick(market: dict) -> float | None:
    """One tick for the whole sample: the latest regime's, at the highest prices (its last band); None without one."""
    regimes = _checked(market)["_tick_regimes"]
    if not regimes or regimes[-1][1] is None:
        return None
    return regimes[-1][1][-1][1]
