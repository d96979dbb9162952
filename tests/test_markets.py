"""Market profiles: a midday break, a half day, a time zone east of UTC whose
session crosses UTC midnight, and clear errors for a bad profile.

Which local session a UTC instant falls in is computed independently with
Python's ``zoneinfo`` (the IANA time-zone database)."""

from datetime import date, time
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np
import polars as pl
import pytest
import yaml

from liqpanel.bars import trading_bars
from liqpanel.clean import clean_trades
from liqpanel.config import MARKETS_DIR, load_market
from liqpanel.core.errors import ConfigError
from liqpanel.simulate import simulate_security_months

RULES = {"nonpositive": True, "outside_session": True, "duplicates": True}


def _local(ts, tz):
    return [t.astimezone(ZoneInfo(tz)) for t in ts]


def test_midday_break_and_half_day_drop_exactly_the_trades_outside_the_sessions():
    market = load_market("kestrel")  # 08:40-11:25 and 12:55-15:10 Asia/Kolkata; 2021-11-16 closes 10:40
    sim = simulate_security_months(np.array([0.002, 0.004]), 0.02, 60.0, n_days=12, seed=4, tz="Asia/Kolkata",
                                   session=("08:40", "15:10"), start="2021-11")
    kept, audit = clean_trades(sim.trades.lazy(), market, RULES, month="2021-11", sample=("2021-11", "2021-11"))
    kept, audit = kept.collect(), audit.collect()
    local = _local(sim.trades["ts"].to_list(), "Asia/Kolkata")

    def inside(t):
        clock = t.time()
        close = time(10, 40) if t.date() == date(2021, 11, 16) else time(15, 10)
        morning = time(8, 40) <= clock <= min(time(11, 25), close)
        afternoon = time(12, 55) <= clock <= close
        return morning or afternoon

    expected_kept = sum(inside(t) for t in local)
    assert 0 < expected_kept < len(local)
    assert kept.height == expected_kept
    assert audit["drop_outside_session"].sum() == len(local) - expected_kept
    half_day = kept.filter(pl.col("date") == date(2021, 11, 16))
    assert max(_local(half_day["ts"].to_list(), "Asia/Kolkata")).time() <= time(10, 40)


def test_session_crossing_utc_midnight_keeps_local_days_and_months():
    market = load_market("tidewater")  # 10:20-16:50 Pacific/Auckland (UTC+13 in summer)
    sim = simulate_security_months(np.array([0.003]), 0.02, 30.0, n_days=25, seed=6, tz="Pacific/Auckland",
                                   session=("10:20", "16:50"), start="2021-01")
    utc_days = {t.date() for t in sim.trades["ts"].to_list()}
    local_days = {t.date() for t in _local(sim.trades["ts"].to_list(), "Pacific/Auckland")}
    assert utc_days != local_days  # the session straddles UTC midnight
    months = {}
    for month in ("2021-01", "2021-02"):
        kept, audit = clean_trades(sim.trades.lazy(), market, RULES, month=month, sample=("2021-01", "2021-02"))
        months[month] = kept.collect()
        assert audit.collect()["drop_outside_session"].sum() == 0
    assert sum(f.height for f in months.values()) == sim.trades.height
    bars = trading_bars(pl.concat(months.values()).lazy())
    assert sorted(bars.collect()["date"].unique().to_list()) == sorted(local_days)
    february = months["2021-02"]
    first = february.sort("ts").row(0, named=True)
    assert first["date"] == date(2021, 2, 1) and first["ts"].date() == date(2021, 1, 31)


def test_shipped_profiles_load():
    names = sorted(p.stem for p in MARKETS_DIR.glob("*.yaml"))
    assert {"demo", "kestrel", "tidewater"} <= set(names)
    for name in names:
        market = load_market(name)
        assert market["_sessions"] and ZoneInfo(market["timezone"])
    assert len(load_market("kestrel")["_sessions"]) == 2
    gullwing = load_market("gullwing")
    assert len(gullwing["_sessions"]) == 2 and gullwing["tick_size"] == 0.05 and gullwing["currency"] == "ZZG"
    # an invented calendar: a handful of weekdays in each of the demo's sample years, sorted
    holidays = gullwing["_holidays"]
    assert list(holidays) == sorted(holidays) and all(d.weekday() < 5 for d in holidays)
    assert {d.year for d in holidays} == {2021, 2022} and min(sum(d.year == y for d in holidays) for y in (2021, 2022)) >= 4
    assert load_market("demo")["_holidays"] == ()


@pytest.mark.parametrize(
    "change,needle",
    [
        ({"timezone": "Mars/Olympus"}, "not an IANA time-zone name"),
        ({"sessions": [["10:00", "09:00"]]}, "must follow the open"),
        ({"sessions": [["09:00", "12:00"], ["11:00", "15:00"]]}, "opens before the previous session closes"),
        ({"sessions": [["9am", "12:00"]]}, "expected a local time 'HH:MM'"),
        ({"half_days": {"2021-13-01": "12:00"}}, "is not a date"),
        ({"tick_size": -1}, "tick_size"),
        ({"lunch": True}, "unknown key 'lunch'"),
        ({"holidays": "2021-03-10"}, "holidays: expected a list"),
        ({"holidays": ["2021-02-30"]}, "holidays[0]: '2021-02-30' is not a date"),
        ({"holidays": ["2021-03-10", "2021-03-13"]}, "holidays[1]: 2021-03-13 is a Saturday"),
        ({"holidays": ["2021-03-10", "2021-03-10"]}, "2021-03-10 is listed twice"),
        ({"holidays": ["2021-03-10"], "half_days": {"2021-03-10": "12:00"}}, "both a holiday and a half day"),
    ],
)
def test_bad_profiles_are_refused_naming_file_and_key(tmp_path, change, needle):
    profile = yaml.safe_load((MARKETS_DIR / "demo.yaml").read_text())
    profile.update(change)
    path = Path(tmp_path) / "bad.yaml"
    path.write_text(yaml.safe_dump(profile))
    with pytest.raises(ConfigError) as info:
        load_market(str(path))
    assert needle in str(info.value) and "bad.yaml" in str(info.value)



@pytest.mark.parametrize(
    ("profile", "month"),
    [
        ("demo", "2021-03"),        # New York: clocks forward on 14 March, 02:00 -> 03:00
        ("demo", "2021-11"),        # New York: clocks back on 7 November, 02:00 -> 01:00 (an hour twice)
        ("tidewater", "2021-04"),   # Auckland: clocks back on 4 April; the session crosses UTC midnight
        ("tidewater", "2021-09"),   # Auckland: clocks forward on 26 September
        ("kestrel", "2021-06"),     # Kolkata: UTC+05:30 all year, no change
    ],
)
def test_integer_local_clock_matches_zoneinfo_across_clock_changes(profile, month):
    # every 7 minutes and 13 seconds over the month's window, and each second around the change
    from liqpanel.clean.rules import _window
    from liqpanel.markets import local_clock
    from liqpanel.markets.sessions import _offsets_within

    market = load_market(profile)
    zone = ZoneInfo(market["timezone"])
    lo, hi = _window(month)
    step = pl.datetime_range(lo, hi, "433s", time_zone="UTC", eager=True)
    frame = pl.DataFrame({"ts": step.dt.cast_time_unit("us")})
    changes = [start for start, _ in _offsets_within(market["timezone"], lo, hi)[1:]]
    assert len(changes) == (0 if profile == "kestrel" else 1)
    for start in changes:  # the seconds either side of the change, to the microsecond
        near = pl.Series([start + k * 1_000_000 + d for k in range(-3, 4) for d in (-1, 0, 1)]).cast(pl.Datetime("us", "UTC"))
        frame = pl.concat([frame, pl.DataFrame({"ts": near})])
    day, clock = local_clock(pl.col("ts"), market, (lo, hi))
    got = frame.select(day.alias("date"), clock.alias("time"))
    local = [t.astimezone(zone) for t in frame["ts"].to_list()]
    assert got["date"].to_list() == [t.date() for t in local]
    assert got["time"].to_list() == [t.time().replace(tzinfo=None) for t in local]
    if profile == "tidewater":  # a trading day that begins on the previous UTC date
        opens = got.with_columns(frame["ts"]).filter(pl.col("time").is_between(time(10, 0), time(10, 8)))
        assert (opens["ts"].dt.date() < opens["date"]).all() and opens.height > 20
