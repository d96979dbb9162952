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

from liqpanel.markets.calendars import for_sample, has_calendar, sample_span, trading_days
from liqpanel.markets.profile import PROFILE_KEYS, WEEKDAYS, check_market, parse_clock
from liqpanel.markets.sessions import local_clock, session_bound, session_index, sessions_of
from liqpanel.markets.ticks import latest_tick, limit_expr, tick_expr, tick_is_constant

__all__ = [
    "PROFILE_KEYS",
    "WEEKDAYS",
    "check_market",
    "for_sample",
    "has_calendar",
    "latest_tick",
    "limit_expr",
    "local_clock",
    "parse_clock",
    "sample_span",
    "session_bound",
    "session_index",
    "sessions_of",
    "tick_expr",
    "tick_is_constant",
    "trading_days",
]
