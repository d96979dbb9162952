"""The clean stage: every named rule fires on purpose, and kept + dropped = read.

Expected rule of every planted row follows from the rule definitions in
``liqpanel.clean`` (Barndorff-Nielsen, Hansen, Lunde & Shephard 2009, rules
P1-P3, T1-T4, Q1-Q3; Brownlees & Gallo 2006); local times are converted
with Python's ``zoneinfo`` (the IANA database), independently of polars.
"""

from datetime import datetime, timezone
from zoneinfo import ZoneInfo

import numpy as np
import polars as pl
import pytest

from liqpanel.bars import daily_bars
from liqpanel.clean import QUOTE_RULES, RULES, TRADE_RULES, check_conservation, clean_trades
from liqpanel.config import load_market, validate_config
from liqpanel.clean.job import run_clean
from liqpanel.core.settings import for_job

NEW_YORK = ZoneInfo("America/New_York")
MARKET = load_market("demo")  # America/New_York, one session 09:10-15:40
RULES_ON = {"nonpositive": True, "outside_session": True, "duplicates": True}


def _local(day, hh, mm, ss=0, month=1, year=2021):
    return datetime(year, month, day, hh, mm, ss, tzinfo=NEW_YORK).astimezone(timezone.utc)


def _text(ts):
    """Naive local text, as many vendors write it (read in the market's time zone)."""
    return ts.astimezone(NEW_YORK).strftime("%Y-%m-%d %H:%M:%S") if ts else ""


# quotes: security, local time, bid, ask, venue, expected rule (None = kept)
QUOTES = [
    ("AAA", _local(4, 9, 45), "9.90", "10.10", "A", None),
    ("AAA", _local(4, 10, 0), "9.90", "10.10", "A", None),
    ("AAA", _local(4, 10, 0), "9.94", "10.06", "B", "merged_same_time"),  # Q1: median bid/ask
    ("AAA", _local(4, 10, 0), "9.90", "10.10", "A", "duplicate"),
    ("AAA", _local(4, 10, 5), "10.10", "10.00", "A", "crossed_quote"),  # Q2: ask < bid
    ("AAA", _local(4, 10, 6), "10.00", "10.00", "A", "crossed_quote"),  # locked: ask = bid
    ("AAA", _local(4, 10, 7), "1.00", "12.00", "A", "wide_spread"),  # Q3: 11 > 50 x median 0.2
    ("AAA", _local(4, 10, 8), "0", "10.10", "A", "nonpositive"),
    ("AAA", _local(4, 8, 0), "9.90", "10.10", "A", "outside_session"),
    ("AAA", _local(4, 10, 9), "9.90", "10.10", "Z", "excluded_venue"),
    ("AAA", _local(4, 10, 10), "", "10.10", "A", "missing_field"),
    ("AAA", _local(4, 10, 11), "9.9O", "10.10", "A", "unparseable"),  # letter O for a zero
    ("AAA", _local(31, 10, 0, month=12, year=2020), "9.90", "10.10", "A", "outside_sample"),
    ("AAA", _local(4, 10, 30), "9.92", "10.12", "A", None),
    ("AAA", _local(4, 11, 0), "9.90", "10.10", "A", None),
]

# trades: security, local time, price, size, venue, condition code, correction code, expected rule
TRADES = [
    ("AAA", _local(4, 10, 1), "10.00", "100", "A", "n1", "ok", None),
    ("AAA", _local(4, 10, 2), "10.02", "100", "A", "n1", "ok", None),
    ("AAA", _local(4, 10, 2), "10.02", "100", "A", "n1", "ok", "duplicate"),
    ("AAA", _local(4, 10, 3), "10.00", "100", "A", "n1", "ok", None),  # merged: median of 10.00, 10.02
    ("AAA", _local(4, 10, 3), "10.02", "200", "B", "n1", "ok", "merged_same_time"),
    ("AAA", _local(4, 10, 4), "10.01", "100", "A", "n1", "ok", None),
    ("AAA", _local(4, 10, 12), "10.20", "100", "A", "n1", "ok", "outlier"),  # inside T4 bounds (9.76, 10.24), far from neighbours
    ("AAA", _local(4, 10, 13), "10.00", "100", "A", "n1", "ok", None),
    ("AAA", _local(4, 10, 14), "10.35", "100", "A", "n1", "ok", "outside_quotes"),  # > ask 10.10 + spread 0.20
    ("AAA", _local(4, 10, 15), "10.02", "100", "A", "n1", "ok", None),
    ("AAA", _local(4, 10, 31), "10.01", "100", "A", "n1", "ok", None),
    ("AAA", _local(4, 10, 32), "10.01", "100", "A", "x4", "ok", "excluded_condition"),
    ("AAA", _local(4, 10, 33), "10.01", "100", "A", "q8", "ok", "excluded_condition"),  # unlisted code
    ("AAA", _local(4, 10, 34), "10.01", "100", "A", "n1", "rv", "correction"),
    ("AAA", _local(4, 10, 35), "10.01", "100", "Z", "n1", "ok", "excluded_venue"),
    ("AAA", _local(4, 10, 36), "0", "100", "A", "n1", "ok", "nonpositive"),
    ("AAA", _local(4, 10, 37), "10.01", "-5", "A", "n1", "ok", "nonpositive"),
    ("AAA", _local(4, 16, 30), "10.01", "100", "A", "n1", "ok", "outside_session"),
    ("AAA", None, "10.01", "100", "A", "n1", "ok", "missing_field"),
    ("", _local(4, 10, 38), "10.01", "100", "A", "n1", "ok", "missing_field"),
    ("AAA", _local(4, 10, 39), "ten", "100", "A", "n1", "ok", "unparseable"),
    ("AAA", _local(1, 10, 0, month=3), "10.01", "100", "A", "n1", "ok", "outside_sample"),
    ("BBB", _local(5, 11, 0), "20.00", "50", "A", "n1", "ok", "no_quote"),  # BBB has no quotes at all
    ("AAA", _local(5, 11, 0), "10.00", "50", "A", "n1", "ok", "no_quote"),  # AAA has no quote on the 5th
]


def _write_inputs(folder, trades=TRADES, quotes=QUOTES):
    trade_lines = ["instr,stamp,deal_px,deal_qty,place,flags,amend"]  # an invented vendor layout
    trade_lines += [",".join([r[0], _text(r[1]), r[2], r[3], r[4], r[5], r[6]]) for r in reversed(trades)]  # unsorted
    quote_lines = ["instr,stamp,bid,ask,place"] + [",".join([r[0], _text(r[1]), r[2], r[3], r[4]]) for r in quotes]
    (folder / "trades.csv").write_text("\n".join(trade_lines) + "\n")
    (folder / "quotes.csv").write_text("\n".join(quote_lines) + "\n")


def _config(folder, **clean):
    cfg = validate_config(
        {
            "sample": {"start": "2021-01", "end": "2021-02"},
            "market": "demo",
            "inputs": {"trades": str(folder / "trades.csv"), "quotes": str(folder / "quotes.csv")},
            "columns": {
                "trades": {"instr": "security", "stamp": "ts", "deal_px": "price", "deal_qty": "size",
                           "place": "venue", "flags": "cond", "amend": "correction"},
                "quotes": {"instr": "security", "stamp": "ts", "place": "venue"},
            },
            "clean": {
                "unparseable": "drop",
                "venues": ["A", "B"],
                "conditions": {"codes": {"n1": "keep", "x4": "drop"}, "unlisted": "drop"},  # invented codes
                "corrections": {"codes": {"ok": "keep", "rv": "drop"}},
                "unquoted_trades": "drop",
                "outliers": {"k": 4, "delta": 0.5, "gamma": 0.02, "threshold": 3},
                **clean,
            },
            "measures": {"amihud": None},
        }
    )
    return cfg


def _clean_all(folder, cfg):
    out = {}
    for month in ("2021-01", "2021-02"):
        paths = [folder / f"{month}-{name}.parquet" for name in ("trades", "audit", "quotes")]
        run_clean(month, *map(str, paths), **for_job(cfg, run_clean))
        out[month] = [pl.read_parquet(p) for p in paths]
    trades = pl.concat([v[0] for v in out.values()])
    audit = pl.concat([v[1] for v in out.values()])
    quotes = pl.concat([v[2] for v in out.values()])
    return trades, audit, quotes


@pytest.fixture(scope="module")
def cleaned(tmp_path_factory):
    folder = tmp_path_factory.mktemp("clean")
    _write_inputs(folder)
    return _clean_all(folder, _config(folder))


@pytest.mark.parametrize("table,rows,rules", [("trades", TRADES, TRADE_RULES), ("quotes", QUOTES, QUOTE_RULES)])
def test_every_rule_fires_with_the_expected_counts(cleaned, table, rows, rules):
    _, audit, _ = cleaned
    expected = [r[-1] for r in rows]
    part = audit.filter(pl.col("table") == table)
    totals = part.select(pl.col("rows_read", "rows_kept", *[f"drop_{r}" for r in RULES]).sum()).row(0, named=True)
    assert totals["rows_read"] == len(rows)  # every row read lands in exactly one partition
    assert totals["rows_kept"] == expected.count(None)
    for rule in rules:
        assert totals[f"drop_{rule}"] == expected.count(rule), rule
        assert totals[f"drop_{rule}"] > 0, f"rule {rule} never fired"
    for rule in set(RULES) - set(rules):
        assert totals[f"drop_{rule}"] == 0, rule


def test_conservation_per_security_day(cleaned):
    _, audit, _ = cleaned
    check_conservation(audit)  # raises when kept + dropped != read
    dropped = audit.select(pl.sum_horizontal([pl.col(f"drop_{r}") for r in RULES])).to_series()
    assert (audit["rows_kept"] + dropped == audit["rows_read"]).all()
    assert audit.height == audit.select("table", "security", "date").unique().height


def test_conservation_check_catches_a_broken_audit(cleaned):
    _, audit, _ = cleaned
    with pytest.raises(AssertionError):
        check_conservation(audit.with_columns((pl.col("rows_read") + 1).alias("rows_read")))


def test_same_time_records_are_merged_by_median(cleaned):
    trades, _, quotes = cleaned
    # BNHLS (2009) T3: one trade at the median price; sizes summed (volume kept)
    merged = trades.filter(pl.col("ts") == _local(4, 10, 3)).row(0, named=True)
    assert merged["price"] == pytest.approx(10.01) and merged["size"] == 300.0
    # BNHLS (2009) Q1: median bid and ask of the quotes at 10:00 (the duplicate removed first)
    quote = quotes.filter(pl.col("ts") == _local(4, 10, 0)).row(0, named=True)
    assert (quote["bid"], quote["ask"]) == (pytest.approx(9.92), pytest.approx(10.08))


def test_the_audit_states_how_timestamps_were_read(cleaned):
    _, audit, _ = cleaned
    notes = set(audit["timestamps"].to_list())
    assert any("America/New_York" in n for n in notes)


def test_unquoted_trades_are_kept_and_counted_by_default(tmp_path):
    _write_inputs(tmp_path)
    trades, audit, _ = _clean_all(tmp_path, _config(tmp_path, unquoted_trades="keep"))
    assert audit["drop_no_quote"].sum() == 0
    assert audit["kept_without_quote"].sum() == 2
    assert trades.filter(pl.col("security") == "BBB").height == 1


def test_unparseable_values_stop_the_run_naming_file_column_and_row(tmp_path):
    from liqpanel.core.errors import InputError

    _write_inputs(tmp_path)
    with pytest.raises(InputError) as info:
        _clean_all(tmp_path, _config(tmp_path, unparseable="error"))
    message = str(info.value)
    assert "quotes.csv" in message and "column 'bid'" in message and "'9.9O'" in message
    assert "data row 12" in message  # the 12th quote row of the file


def test_codes_with_a_separator_drop_a_row_if_any_code_drops():
    frame = pl.DataFrame(
        {
            "security": ["X"] * 3,
            "ts": [_local(6, 10, m) for m in range(3)],
            "price": [1.0, 1.0, 1.1],
            "size": [1.0, 1.0, 1.0],
            "cond": ["n1", "n1;x4", " n1 ; "],
        },
        schema_overrides={"ts": pl.Datetime("us", "UTC")},
    )
    rules = {**RULES_ON, "conditions": {"codes": {"n1": "keep", "x4": "drop"}, "separator": ";"}}
    kept, audit = clean_trades(frame.lazy(), MARKET, rules, month="2021-01", sample=("2021-01", "2021-01"))
    assert kept.collect()["price"].to_list() == [1.0, 1.1]
    assert audit.collect()["drop_excluded_condition"].sum() == 1


def test_session_bounds_are_inclusive_and_local():
    # 09:10 and 15:40 local are inside the session (common practice: the
    # opening and closing trades belong to the day)
    frame = pl.DataFrame(
        {"security": ["X"] * 3, "ts": [_local(6, 9, 10), _local(6, 15, 40), _local(6, 9, 9)],
         "price": [1.0, 1.0, 1.0], "size": [1.0, 2.0, 3.0]},
        schema_overrides={"ts": pl.Datetime("us", "UTC")},
    )
    kept, audit = clean_trades(frame.lazy(), MARKET, RULES_ON, month="2021-01", sample=("2021-01", "2021-01"))
    assert kept.collect().height == 2
    assert audit.collect()["drop_outside_session"].sum() == 1


def test_daily_bars_from_clean_trades(cleaned):
    trades, _, _ = cleaned
    bars = daily_bars(trades.lazy()).collect()
    aaa = bars.filter(pl.col("security") == "AAA").row(0, named=True)
    prices = [10.00, 10.02, 10.01, 10.01, 10.00, 10.02, 10.01]  # kept trades of the 4th, merged one at 10.01
    sizes = [100, 100, 300, 100, 100, 100, 100]
    assert (aaa["open"], aaa["high"], aaa["low"], aaa["close"]) == (10.0, 10.02, 10.0, 10.01)
    assert aaa["volume"] == sum(sizes) and aaa["n_trades"] == len(prices)
    assert aaa["dollar_volume"] == pytest.approx(sum(p * s for p, s in zip(prices, sizes)))
    assert aaa["vwap"] == pytest.approx(aaa["dollar_volume"] / aaa["volume"])


def _scrambled_trades(order: str) -> pl.DataFrame:
    """Trades with many exact copies and same-time records, in time order or shuffled; a few without a time."""
    rng = np.random.default_rng(11)
    n = 4000
    frame = pl.DataFrame({
        "security": rng.choice(["KX2", "AB1", "ZQ9", "M00"], n),
        "ts": [_local(4 + int(d), 10, int(m), int(s)) for d, m, s in zip(rng.integers(0, 3, n), rng.integers(0, 3, n),
                                                                          rng.integers(0, 60, n))],
        "price": rng.choice([10.0, 10.01, 10.02, 9.99], n),
        "size": rng.choice([100.0, 200.0], n),
    }).with_columns(pl.when(pl.int_range(pl.len()) % 997 == 5).then(None).otherwise(pl.col("ts")).alias("ts"))
    return frame.sort("ts", "security", nulls_last=True) if order == "time" else frame


@pytest.mark.parametrize("order", ["time", "shuffled"])
def test_duplicates_and_same_time_merges_match_pandas_in_any_input_order(order):
    # pandas as the reference: a stable sort on security, time and input row; exact copies
    # dropped (keep the first), then one record per security and time with the median
    # price and summed size (BNHLS 2009, T3); rows without a time dropped first
    trades = _scrambled_trades(order)
    rules = {**RULES_ON, "same_timestamp": "merge"}
    kept, audit = clean_trades(trades.lazy(), MARKET, rules, month="2021-01", sample=("2021-01", "2021-01"))
    kept, audit = kept.collect(), audit.collect()

    frame = trades.to_pandas()
    frame["row"] = range(len(frame))
    frame = frame.dropna(subset=["ts"]).sort_values(["security", "ts", "row"], kind="stable")
    unique = frame[~frame.duplicated(subset=["security", "ts", "price", "size"], keep="first")]
    expected = unique.groupby(["security", "ts"], sort=True).agg(price=("price", "median"), size=("size", "sum"))
    expected = expected.reset_index()
    assert kept.height == len(expected) and kept.height < trades.height / 2  # most rows are copies or same-time
    assert kept["security"].to_list() == expected["security"].tolist()
    assert kept["ts"].dt.epoch("us").to_list() == expected["ts"].dt.as_unit("us").astype("int64").tolist()
    assert kept["price"].to_list() == pytest.approx(expected["price"].tolist(), abs=0)
    assert kept["size"].to_list() == expected["size"].tolist()
    totals = audit.select(pl.col("drop_duplicate", "drop_merged_same_time", "drop_missing_field").sum()).row(0)
    assert totals == (len(frame) - len(unique), len(unique) - len(expected), trades["ts"].null_count())
