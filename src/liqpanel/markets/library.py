"""The exchange-calendars library behind a profile's ``calendar`` code: its calendar, open days and sessions, asked quietly."""

from __future__ import annotations

import warnings
import zoneinfo
from datetime import date

from liqpanel.core.errors import ConfigError


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
