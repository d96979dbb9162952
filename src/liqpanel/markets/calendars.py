"""A profile's trading calendar: whether it has one, its open days over a span, and the profile made ready for a sample."""

from __future__ import annotations

import warnings
from datetime import date, time, timedelta

import polars as pl

from liqpanel.core.errors import ConfigError
from liqpanel.markets.library import _library_days
from liqpanel.markets.profile import _checked, _date


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
