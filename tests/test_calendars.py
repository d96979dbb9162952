"""Trading calendars, closed days against days without trades, tick regimes and price limits.

The calendars of real exchanges come from the exchange-calendars library,
which ships its data (no network); the checks compare our profile's days
with the library's own API (the outside source). The markets of the other
checks are invented: their days, prices, ticks and limits are planted, and
each expected value is worked out beside the check from the formula it
tests.
"""

from __future__ import annotations

from datetime import date, time, timedelta

import numpy as np
import polars as pl
import pytest
import yaml

from liqpanel.cli import main
from liqpanel.core.errors import ConfigError
from liqpanel.markets import check_market, for_sample, session_index, tick_expr, trading_days
from liqpanel.measures import compute
from liqpanel.bars.daily_job import _read_daily
from liqpanel.core.settings import for_job
from liqpanel.measures.job import run_measures_month

xc = pytest.importorskip("exchange_calendars")
# The library's pandas idioms warn under newer pandas; its values are what is compared.
pytestmark = pytest.mark.filterwarnings("ignore:.*deprecated.*")

# ------------------------------------------------------------ calendars from the library


def test_library_calendar_gives_the_library_sessions_and_early_closes():
    profile = check_market({"name": "nyse-like", "calendar": "XNYS"}, "nyse.yaml")
    days = trading_days(profile, "2023-01-01", "2023-12-31")
    library = xc.get_calendar("XNYS", start="2023-01-01", end="2023-12-31")  # the outside source
    assert days["date"].to_list() == [d.date() for d in library.sessions]
    assert days.height == len(library.sessions) == 250
    # The library's early closes of 2023, at its local close time.
    early = days.filter(pl.col("early_close").is_not_null())
    assert early["date"].to_list() == [d.date() for d in library.early_closes]
    zone = library.tz
    assert early["early_close"].to_list() == [library.closes[d].astimezone(zone).time() for d in library.early_closes]
    # From memory: the day after Thanksgiving closes at 13:00 in New York (2023-11-24); independence day is shut.
    assert (date(2023, 11, 24), time(13, 0)) in list(early.select("date", "early_close").iter_rows())
    assert date(2023, 7, 4) not in days["date"].to_list()
    # Zone and regular session come from the library when the profile gives none.
    assert profile["timezone"] == str(zone)
    assert profile["_sessions"] == [(library.open_times[-1][1], library.close_times[-1][1])]


def test_library_calendar_with_a_midday_break():
    profile = check_market({"calendar": "XHKG"}, "hk.yaml")
    library = xc.get_calendar("XHKG", start="2023-01-01", end="2023-12-31")  # the outside source
    (open_, pause), (resume, close) = profile["_sessions"]
    assert (open_, pause, resume, close) == (library.open_times[-1][1], library.break_start_times[-1][1],
                                             library.break_end_times[-1][1], library.close_times[-1][1])
    days = trading_days(profile, "2023-01-01", "2023-12-31")
    assert days["date"].to_list() == [d.date() for d in library.sessions]
    first = library.sessions[0]
    zone = library.tz
    row = days.row(0, named=True)
    assert (row["break_start"], row["break_end"]) == (library.break_starts[first].astimezone(zone).time(),
                                                      library.break_ends[first].astimezone(zone).time())


def test_profile_keys_override_the_library():
    profile = check_market(
        {"calendar": "XNYS", "holidays": ["2023-07-03"], "half_days": {"2023-12-22": "12:30"},
         "sessions": [["09:00", "15:00"]], "timezone": "America/Chicago"},
        "own.yaml",
    )
    assert profile["timezone"] == "America/Chicago" and profile["_sessions"] == [(time(9), time(15))]
    days = trading_days(profile, "2023-07-01", "2023-12-31")
    assert date(2023, 7, 3) not in days["date"].to_list()  # the library has it as an early close; ours shuts it
    assert days.filter(pl.col("date") == date(2023, 12, 22))["early_close"].item() == time(12, 30)
    # The clean stage's half days over the sample: the library's, with the profile's own winning.
    sample = for_sample(profile, date(2023, 1, 1), date(2023, 12, 31))
    assert sample["_half_days"][date(2023, 11, 24)] == time(13, 0)
    frame = pl.DataFrame({"day": [date(2023, 11, 24), date(2023, 11, 27)], "clock": [time(14, 0), time(14, 0)]})
    inside = frame.select(session_index(sample, pl.col("clock"), pl.col("day")).alias("session"))["session"].to_list()
    assert inside == [None, 0]  # 14:00 is after the early close of the 24th, inside the session of the 27th


def test_hand_written_holidays_and_weekend():
    profile = check_market({"timezone": "Asia/Dubai", "sessions": [["10:00", "14:00"]],
                            "weekend": ["friday", "saturday"], "holidays": ["2023-03-06"]}, "gulf.yaml")
    days = trading_days(profile, "2023-03-01", "2023-03-10")["date"].to_list()
    # 1-10 March 2023: Wed 1 ... Fri 10 (calendar arithmetic); Fri 3, Sat 4 and Fri 10 are the weekend.
    assert days == [date(2023, 3, d) for d in (1, 2, 5, 7, 8, 9)]


def test_a_closed_day_has_no_session_for_the_clean_stage():
    # A trade stamped on a holiday or on the weekend is bad data: the clean
    # stage's outside_session rule drops it (a closed day has no session).
    profile = check_market({"timezone": "UTC", "sessions": [["09:00", "17:00"]], "holidays": ["2023-01-16"]}, "h.yaml")
    sample = for_sample(profile, date(2023, 1, 1), date(2023, 1, 31))
    days = [date(2023, 1, 13), date(2023, 1, 14), date(2023, 1, 16), date(2023, 1, 17), date(2023, 2, 4)]
    frame = pl.DataFrame({"day": days, "clock": [time(12, 0)] * len(days)})
    got = frame.select(session_index(sample, pl.col("clock"), pl.col("day")))
    # Fri 13 open, Sat 14 weekend, Mon 16 the holiday, Tue 17 open (calendar arithmetic); 4 February is
    # beyond the span prepared, so only the clock decides
    assert got.to_series().to_list() == [0, None, None, 0, 0]
    plain = frame.select(session_index(profile, pl.col("clock"), pl.col("day"))).to_series().to_list()
    assert plain == [0] * len(days)  # the profile alone, without the sample's calendar: the clock only


def test_profile_without_a_calendar_has_no_trading_days():
    profile = check_market({"timezone": "UTC", "sessions": [["09:00", "17:00"]]}, "plain.yaml")
    with pytest.raises(ConfigError, match="no trading calendar"):
        trading_days(profile, "2023-01-01", "2023-01-31")


# ------------------------------------------------------------ closed days against days without trades

OPEN = [date(2023, 1, d) for d in (9, 10, 11, 12, 13, 17, 18, 19, 20)]  # Monday 16 January: an invented holiday
HOLIDAY_PROFILE = {"name": "invented", "timezone": "UTC", "sessions": [["09:00", "17:00"]],
                   "holidays": ["2023-01-16"]}


def _daily(days: list[date], closes: list[float], ranges: list[float] | None = None) -> pl.DataFrame:
    ranges = ranges or [0.02] * len(days)
    return pl.DataFrame({
        "security": ["sim-a"] * len(days),
        "date": days,
        "open": closes,
        "high": [c * (1 + r) for c, r in zip(closes, ranges)],
        "low": [c * (1 - r) for c, r in zip(closes, ranges)],
        "close": closes,
        "volume": [100.0] * len(days),
    })


def test_closed_days_are_not_zero_days_but_open_days_without_trades_are():
    traded = [d for d in OPEN if d != date(2023, 1, 18)]  # no trade on an open day
    closes = [10.0, 10.1, 10.0, 10.2, 10.1, 10.3, 10.2, 10.4]  # no zero return among the rows
    daily = _daily(traded, closes)
    with_calendar = compute(daily, {"zero_return_share": {"min_days": 1}}, market=HOLIDAY_PROFILE)
    without = compute(daily, {"zero_return_share": {"min_days": 1}})
    # Lesmond, Ogden & Trzcinka (1999): zero days / days. The month's days in the listed span (9-20 January) are
    # the 9 open days; one (the 18th) has no trade and counts as a zero. The first row has no return (no
    # previous close in the frame), so the days with a return are 7 rows + 1 day without a trade.
    assert with_calendar["zero_return_share"].item() == pytest.approx(1 / 8)
    # Inferred from the data (the fallback) the 18th is not a market day at all: no zero day.
    assert without["zero_return_share"].item() == pytest.approx(0.0)
    # A calendar of plain weekdays would count the 16th as a day without a trade too.
    weekdays = compute(daily, {"zero_return_share": {"min_days": 1}}, calendar=[date(2023, 1, 9) + timedelta(d) for d in range(12)
                                                               if (date(2023, 1, 9) + timedelta(d)).weekday() < 5])
    assert weekdays["zero_return_share"].item() == pytest.approx(2 / 9)


def test_a_holiday_keeps_a_pair_and_an_open_day_without_trades_breaks_it():
    traded = [d for d in OPEN if d != date(2023, 1, 18)]
    closes = [10.0, 10.1, 10.0, 10.2, 10.1, 10.3, 10.2, 10.4]
    daily = _daily(traded, closes)
    names = {name: {"min_days": 1} for name in ("cs_spread", "ar_spread_2day", "edge_spread", "roll_spread")}
    ours = compute(daily, names, market=HOLIDAY_PROFILE)
    fallback = compute(daily, names)
    # 8 rows: 7 neighbouring pairs; the one across the 18th (17th -> 19th) is broken, the one across the
    # holiday (13th -> 17th) is kept.
    assert fallback["cs_spread_n"].item() == 7 and ours["cs_spread_n"].item() == 6
    assert fallback["ar_spread_2day_n"].item() == 7 and ours["ar_spread_2day_n"].item() == 6
    assert fallback["edge_spread_n"].item() == 7 and ours["edge_spread_n"].item() == 6
    # Roll: gamma1 = (1/n) sum over pairs of (x_t - m)(x_{t-1} - m), full-sample mean and divisor n
    # (statsmodels acovf's convention); the pair whose later return spans the 18th is left out.
    x = np.diff(np.log(closes))
    m, n = x.mean(), len(x)
    broken = traded.index(date(2023, 1, 19)) - 1  # index in x of the return from the 17th to the 19th
    products = [(x[t] - m) * (x[t - 1] - m) for t in range(1, n) if t != broken]
    gamma1 = sum(products) / n
    from statsmodels.tsa.stattools import acovf  # reference library, for the fallback with every pair

    assert fallback["roll_spread"].item() == pytest.approx(2 * np.sqrt(-acovf(x, fft=False)[1]), rel=1e-10)
    assert gamma1 < 0
    assert ours["roll_spread"].item() == pytest.approx(2 * np.sqrt(-gamma1), rel=1e-10)


def test_a_pair_across_a_holiday_gives_the_same_spread_as_consecutive_days():
    # Corwin & Schultz (2012): with no volatility and a buy and a sell every day, S equals the spread exactly.
    # A holiday between two such days changes nothing; the fallback and the calendar agree.
    days = [date(2023, 1, 13), date(2023, 1, 17)]
    daily = _daily(days, [10.0, 10.0], [0.005, 0.005])
    ours = compute(daily, {"cs_spread": {"min_days": 1}}, market=HOLIDAY_PROFILE)
    spread = (10.05 - 9.95) / 10.0
    assert ours["cs_spread"].item() == pytest.approx(spread, rel=1e-12)
    assert ours["cs_spread_n"].item() == 1


# ------------------------------------------------------------ tick regimes and price limits

TICK_PROFILE = {
    "name": "invented ticks", "timezone": "UTC", "sessions": [["09:00", "17:00"]],
    "tick_size": [{"from": "2021-01-01", "tick": 0.01},
                  {"from": "2021-03-01", "bands": [{"below": 1.0, "tick": 0.001}, {"tick": 0.05}]}],
}


def test_tick_regime_applies_from_its_date_and_by_price_band():
    profile = check_market(TICK_PROFILE, "ticks.yaml")
    frame = pl.DataFrame({"date": [date(2020, 12, 31), date(2021, 2, 26), date(2021, 3, 1), date(2021, 3, 1)],
                          "close": [5.0, 5.0, 5.0, 0.5]})
    assert frame.select(tick_expr(profile))["literal"].to_list() == [None, 0.01, 0.05, 0.001]


def test_effective_tick_uses_the_tick_in_force_each_day():
    rng = np.random.default_rng(3)
    feb = [date(2021, 2, 1) + timedelta(d) for d in range(28) if (date(2021, 2, 1) + timedelta(d)).weekday() < 5]
    mar = [date(2021, 3, 1) + timedelta(d) for d in range(31) if (date(2021, 3, 1) + timedelta(d)).weekday() < 5]
    # Closes on the cent grid in February and on the 5-cent grid in March (the planted regimes).
    closes = [round(20 + rng.integers(-50, 50) * 0.01, 2) for _ in feb] + [round(20 + rng.integers(-10, 10) * 0.05, 2) for _ in mar]
    daily = _daily(feb + mar, closes)
    ours = compute(daily, ["effective_tick"], market=TICK_PROFILE).sort("month")
    # Against the measure run with one constant tick per month (the tick the regime puts in force).
    february = compute(daily.filter(pl.col("date") < date(2021, 3, 1)), ["effective_tick"], tick_size=0.01)
    march = compute(daily.filter(pl.col("date") >= date(2021, 3, 1)), ["effective_tick"], tick_size=0.05)
    assert ours["effective_tick"].to_list() == pytest.approx(
        [february["effective_tick"].item(), march["effective_tick"].item()], rel=1e-12)
    # With the February tick all March, March reads otherwise.
    wrong = compute(daily, ["effective_tick"], tick_size=0.01).sort("month")
    assert wrong["effective_tick"][0] == pytest.approx(ours["effective_tick"][0], rel=1e-12)
    assert wrong["effective_tick"][1] != pytest.approx(ours["effective_tick"][1], rel=1e-3)


def test_limit_days_and_flat_days_are_flagged_and_counted():
    profile = {"name": "invented limits", "timezone": "UTC", "sessions": [["09:00", "17:00"]], "tick_size": 0.01,
               "price_limit": [{"from": "2023-01-01", "limit": 0.10}]}
    days = [date(2023, 1, d) for d in (2, 3, 4, 5, 6, 9)]
    closes = [10.0, 11.0, 11.0 * 1.095, 12.04 * 0.9, 10.84, 10.84]
    # 3rd: 10 -> 11.00, +10%: at the limit. 4th: +9.5%, 0.055 below the limit price 12.10, more than half a
    # tick: not at it. 5th: 12.045 -> 10.836, within half a cent of the lower limit 10.8405. 6th, 9th: flat.
    daily = _daily(days, [round(c, 3) for c in closes], [0.01, 0.01, 0.01, 0.01, 0.0, 0.0])
    out = compute(daily, ["limit_days"], market=profile)
    assert out["limit_days"].item() == 2
    assert out["flat_days"].item() == 2
    # flat_days: drop leaves out the pairs with a flat day: (5th, 6th) and (6th, 9th); 3 of 5 pairs remain.
    kept = compute(daily, {"cs_spread": {"flat_days": "drop", "min_days": 1}}, market=profile)
    used = compute(daily, {"cs_spread": {"min_days": 1}}, market=profile)
    assert (used["cs_spread_n"].item(), kept["cs_spread_n"].item()) == (5, 3)
    edge = compute(daily, {"edge_spread": {"flat_days": "drop", "min_days": 1}}, market=profile)
    assert edge["edge_spread_n"].item() == 3


# ------------------------------------------------------------ bad profiles


@pytest.mark.parametrize(
    ("profile", "expected"),
    [
        ({"calendar": "XQQQ"}, "calendar: unknown exchange calendar 'XQQQ'"),
        ({"timezone": "UTC", "sessions": [["09:00", "17:00"]], "holidays": ["2023-02-30"]},
         "holidays[0]: '2023-02-30' is not a date"),
        ({"timezone": "UTC", "sessions": [["09:00", "17:00"]],
          "tick_size": [{"from": "2022-01-01", "tick": 0.01}, {"from": "2021-01-01", "tick": 0.05}]},
         "tick_size[1]: from 2021-01-01 must come after the previous regime's 2022-01-01"),
        ({"timezone": "UTC", "sessions": [["09:00", "17:00"]],
          "tick_size": [{"from": "2022-13-01", "tick": 0.01}]}, "tick_size[0]: from: '2022-13-01' is not a date"),
        ({"timezone": "UTC", "sessions": [["09:00", "17:00"]],
          "tick_size": [{"from": "2022-01-01", "bands": [{"below": 5, "tick": 0.01}, {"below": 2, "tick": 0.001},
                                                           {"tick": 0.05}]}]},
         "tick_size[0]: bands[1]: below 2.0 overlaps the previous band"),
        ({"timezone": "UTC", "sessions": [["09:00", "17:00"]], "price_limit": 1.5},
         "price_limit: expected a fraction of the previous close"),
        ({"timezone": "UTC", "sessions": [["09:00", "17:00"]], "weekend": ["caturday"]}, "weekend: expected a list"),
    ],
)
def test_bad_profiles_name_the_file_and_the_key(profile, expected):
    with pytest.raises(ConfigError) as caught:
        check_market(profile, "my_market.yaml")
    assert "market profile my_market.yaml" in str(caught.value)
    assert expected in str(caught.value)


def test_check_config_reports_a_bad_profile(tmp_path, capsys):
    from tests.test_preflight import check, daily_config

    path = tmp_path / "my_market.yaml"
    path.write_text(yaml.safe_dump({"timezone": "UTC", "calendar": "XQQQ",
                                    "tick_size": [{"from": "2022-01-01", "bands": [{"tick": 0.01}, {"tick": 0.05}]}]}))
    config = daily_config(tmp_path)
    config.pop("markets"), config["inputs"].pop("fx")
    config["market"] = str(path)
    check(tmp_path, capsys, config, f"market profile {path}", "calendar: unknown exchange calendar 'XQQQ'")


def test_check_config_accepts_a_calendar_backed_profile(tmp_path, capsys):
    from tests.test_preflight import daily_config

    path = tmp_path / "my_market.yaml"
    path.write_text(yaml.safe_dump({"name": "calendar-backed", "calendar": "XNYS", "holidays": ["2021-03-01"],
                                    "tick_size": [{"from": "2021-01-01", "tick": 0.01}], "price_limit": 0.2}))
    config = daily_config(tmp_path)
    config.pop("markets"), config["inputs"].pop("fx")
    config["market"] = str(path)
    (tmp_path / "my.yaml").write_text(yaml.safe_dump(config, sort_keys=False))
    code = main(["check-config", str(tmp_path / "my.yaml")])
    err = capsys.readouterr().err
    assert code == 0, err


def test_an_unquoted_date_that_is_no_date_names_the_profile(tmp_path):
    from liqpanel.config import load_market

    path = tmp_path / "my_market.yaml"
    path.write_text("timezone: UTC\nsessions: [['09:00', '17:00']]\nholidays: [2023-02-30]\n")
    with pytest.raises(ConfigError, match=f"market profile {path}: not readable as YAML"):
        load_market(str(path))


def test_the_measures_job_takes_the_calendar_and_the_tick_regimes_from_the_profile(tmp_path):
    profile = tmp_path / "my_market.yaml"
    profile.write_text(yaml.safe_dump({**HOLIDAY_PROFILE, "tick_size": [{"from": "2023-01-01", "tick": 0.01}]}))
    traded = [d for d in OPEN if d != date(2023, 1, 18)]
    daily = _daily(traded, [10.0, 10.1, 10.0, 10.2, 10.1, 10.3, 10.2, 10.4]).with_columns(
        pl.lit(date(2023, 1, 1)).alias("month"),
        (pl.col("close") / pl.col("close").shift(1) - 1).alias("ret"),
        (pl.col("close") * pl.col("volume")).alias("dollar_volume"),
    )
    path, out = tmp_path / "daily.parquet", tmp_path / "measures.parquet"
    daily.write_parquet(path)
    config = {"market": str(profile), "sample": {"start": "2023-01", "end": "2023-01"},
              "measures": {"zero_return_share": {"min_days": 1}, "cs_spread": {"min_days": 1},
                           "effective_tick": {"min_days": 1}}}
    run_measures_month(str(path), None, str(out), **for_job(config, run_measures_month))
    monthly = pl.read_parquet(out)
    # As in the tests above: one open day without a trade among 8 days with a return; 6 of 7 pairs kept.
    assert monthly["zero_return_share"].item() == pytest.approx(1 / 8)
    assert monthly["cs_spread_n"].item() == 6
    # The tick regime reaches the effective tick (a daily tick column): every close is on the cent grid.
    assert monthly["effective_tick_n"].item() == 8


def test_a_limit_regime_can_be_lifted_and_the_half_tick_follows_the_price_band():
    from liqpanel.measures.limits import limit_day_flag

    profile = check_market({
        "timezone": "UTC", "sessions": [["09:00", "17:00"]],
        "tick_size": [{"from": "2023-01-01", "bands": [{"below": 10.0, "tick": 0.01}, {"tick": 0.1}]}],
        "price_limit": [{"from": "2023-01-01", "limit": 0.10}, {"from": "2023-02-01", "limit": None}],
    }, "bands.yaml")
    frame = pl.DataFrame({
        "date": [date(2023, 1, 3), date(2023, 1, 3), date(2023, 1, 3), date(2023, 2, 1)],
        # previous close 20: the upper limit 22.00 lies in the 0.1 band (half tick 0.05): 21.96 is at it.
        # previous close 5: the upper limit 5.50 lies in the 0.01 band (half tick 0.005): 5.49 is not, 5.496 is.
        # previous close 20 in February: no limit in force.
        "close": [21.96, 5.49, 5.496, 22.0],
        "ret": [21.96 / 20 - 1, 5.49 / 5 - 1, 5.496 / 5 - 1, 22.0 / 20 - 1],
    })
    assert frame.select(limit_day_flag(profile))["limit_day"].to_list() == [True, False, True, False]


def test_the_study_calibrates_its_window_on_the_calendar():
    from liqpanel.study import calibrate

    traded = [d for d in OPEN if d != date(2023, 1, 18)]
    daily = _daily(traded, [10.0, 10.1, 10.0, 10.2, 10.1, 10.3, 10.2, 10.4]).with_columns(
        pl.lit(date(2023, 1, 1)).alias("month"), (pl.col("close") * pl.col("volume")).alias("dollar_volume"))
    study = {"min_days": 1, "fallback_spread": "cs_spread"}
    inferred, _ = calibrate(daily.lazy(), study=study)
    ours, _ = calibrate(daily.lazy(), study=study, calendar=trading_days(check_market(HOLIDAY_PROFILE, "h.yaml"),
                                                                         "2023-01-01", "2023-01-31"))
    # Window: the 9 open days of 9-20 January (the 16th closed); 8 traded, so one day in nine without a trade.
    assert ours["n_days"].item() == 9 and ours["no_trade_share"].item() == pytest.approx(1 / 9)
    assert inferred["n_days"].item() == 8 and inferred["no_trade_share"].item() == pytest.approx(0.0)


def test_daily_rows_on_closed_days_are_dropped_and_counted(tmp_path):
    profile = tmp_path / "isle.yaml"
    profile.write_text(yaml.safe_dump({"name": "Isle (invented)", "timezone": "UTC", "sessions": [["09:00", "17:00"]],
                                       "holidays": ["2023-01-16"]}))
    days = ["2023-01-12", "2023-01-13", "2023-01-14", "2023-01-16", "2023-01-17"]  # Thu, Fri, Sat, holiday Mon, Tue
    rows = "".join(f"QOLM,{d},10,10.5,9.5,{10 + k / 10},100\n" for k, d in enumerate(days))
    (tmp_path / "daily.csv").write_text("security,date,open,high,low,close,volume\n" + rows)
    config = {"sample": {"start": "2023-01", "end": "2023-01"}, "market": str(profile),
              "inputs": {"daily": str(tmp_path / "daily.csv")}, "columns": {}}
    read = _read_daily(**for_job(config, _read_daily))
    assert read.daily["date"].cast(pl.String).to_list() == ["2023-01-12", "2023-01-13", "2023-01-17"]
    audit = read.audit.row(0, named=True)
    assert (audit["rows_read"], audit["rows_kept"], audit["drop_closed_day"]) == (5, 3, 2)
    # the Tuesday's return runs from the Friday's close: the closed days are not days (calendar arithmetic)
    assert read.daily["ret"].to_list()[-1] == pytest.approx(10.4 / 10.1 - 1)
