"""A market profile read and checked: its keys, clock times, sessions, half days, holidays, weekend, tick and price-limit regimes."""

from __future__ import annotations

import re
import zoneinfo
from datetime import date, datetime, time
from pathlib import Path

from liqpanel.core.errors import ConfigError
from liqpanel.markets.library import _library_calendar, _library_sessions


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
