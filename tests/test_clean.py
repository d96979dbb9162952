"""The clean stage: every named rule fires, and kept + dropped = read."""

from datetime import datetime, timezone

import polars as pl
import pytest

from liqpanel.bars import daily_bars
from liqpanel.clean import RULES, check_conservation, clean_trades

MARKET = {"timezone": "America/New_York", "sessions": [["09:30", "16:00"]]}
RULES_ON = {"nonpositive": True, "outside_session": True, "duplicates": True}


def _ts(day, hh, mm, tz_offset_hours=-5):
    # New York is UTC-5 in January (common practice: EST)
    return datetime(2021, 1, day, hh - tz_offset_hours, mm, tzinfo=timezone.utc)


def _trades():
    rows = [
        # security, ts, price, size, expected drop rule (None = kept)
        ("AAA", _ts(4, 10, 0), 10.0, 100.0, None),
        ("AAA", _ts(4, 10, 1), 10.1, 100.0, None),
        ("AAA", _ts(4, 10, 1), 10.1, 100.0, "duplicate"),
        ("AAA", _ts(4, 10, 1), 10.1, 100.0, "duplicate"),
        ("AAA", _ts(4, 10, 2), 0.0, 100.0, "nonpositive"),
        ("AAA", _ts(4, 10, 3), 10.0, -5.0, "nonpositive"),
        ("AAA", _ts(4, 8, 0), 10.0, 100.0, "outside_session"),
        ("AAA", _ts(4, 16, 30), 10.0, 100.0, "outside_session"),
        ("AAA", None, 10.0, 100.0, "missing_field"),
        (None, _ts(5, 11, 0), 10.0, 100.0, "missing_field"),
        ("BBB", _ts(5, 11, 0), 20.0, 50.0, None),
        ("BBB", _ts(5, 15, 59), 21.0, 50.0, None),
        ("BBB", datetime(2020, 12, 31, 15, 0, tzinfo=timezone.utc), 20.0, 50.0, "outside_sample"),
        ("BBB", datetime(2021, 3, 1, 15, 0, tzinfo=timezone.utc), 20.0, 50.0, "outside_sample"),
    ]
    frame = pl.DataFrame(
        {
            "security": [r[0] for r in rows],
            "ts": [r[1] for r in rows],
            "price": [r[2] for r in rows],
            "size": [r[3] for r in rows],
        },
        schema={"security": pl.String, "ts": pl.Datetime("us", "UTC"), "price": pl.Float64, "size": pl.Float64},
    )
    return frame, [r[4] for r in rows]


def _run(month, sample=("2021-01", "2021-02")):
    frame, _ = _trades()
    kept, audit = clean_trades(frame.lazy(), MARKET, RULES_ON, month=month, sample=sample)
    return kept.collect(), audit.collect()


def test_every_rule_fires_with_the_expected_counts():
    _, expected = _trades()
    kept_jan, audit_jan = _run("2021-01")
    kept_feb, audit_feb = _run("2021-02")
    audit = pl.concat([audit_jan, audit_feb])
    totals = audit.select(pl.col("rows_read", "rows_kept", *[f"drop_{r}" for r in RULES]).sum()).row(0, named=True)
    assert totals["rows_read"] == len(expected)  # every row read lands in one partition
    assert totals["rows_kept"] == expected.count(None) == kept_jan.height + kept_feb.height
    for rule in RULES:
        assert totals[f"drop_{rule}"] == expected.count(rule), rule
        assert totals[f"drop_{rule}"] > 0, f"rule {rule} never fired"


def test_conservation_per_security_day():
    for month in ("2021-01", "2021-02"):
        _, audit = _run(month)
        check_conservation(audit)  # raises when kept + dropped != read
        dropped = pl.sum_horizontal([pl.col(f"drop_{r}") for r in RULES])
        assert (audit["rows_kept"] + audit.select(dropped).to_series() == audit["rows_read"]).all()


def test_conservation_check_catches_a_broken_audit():
    _, audit = _run("2021-01")
    broken = audit.with_columns((pl.col("rows_read") + 1).alias("rows_read"))
    with pytest.raises(AssertionError):
        check_conservation(broken)


def test_session_bounds_are_inclusive_and_local():
    # 09:30 and 16:00 local are inside the session (common practice: the
    # opening and closing trades belong to the day)
    frame = pl.DataFrame(
        {"security": ["X", "X", "X"], "ts": [_ts(6, 9, 30), _ts(6, 16, 0), _ts(6, 9, 29)], "price": [1.0, 1.0, 1.0], "size": [1.0, 1.0, 1.0]},
        schema={"security": pl.String, "ts": pl.Datetime("us", "UTC"), "price": pl.Float64, "size": pl.Float64},
    )
    kept, audit = clean_trades(frame.lazy(), MARKET, RULES_ON, month="2021-01", sample=("2021-01", "2021-01"))
    assert kept.collect().height == 2
    assert audit.collect()["drop_outside_session"].sum() == 1


def test_daily_bars_from_clean_trades():
    kept, _ = _run("2021-01")
    bars = daily_bars(kept.lazy()).collect()
    aaa = bars.filter(pl.col("security") == "AAA").row(0, named=True)
    assert (aaa["open"], aaa["high"], aaa["low"], aaa["close"]) == (10.0, 10.1, 10.0, 10.1)
    assert aaa["volume"] == 200.0 and aaa["n_trades"] == 2
    assert aaa["dollar_volume"] == pytest.approx(10.0 * 100 + 10.1 * 100)
    assert aaa["vwap"] == pytest.approx((10.0 * 100 + 10.1 * 100) / 200)
    bbb = bars.filter(pl.col("security") == "BBB").row(0, named=True)
    assert bbb["open"] == 20.0 and bbb["close"] == 21.0
