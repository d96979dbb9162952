"""Bad inputs, as a new user would bring them, on every input of a run.

Each stopping case runs ``liqpanel run`` (``liqpanel.cli.main``) on a tiny
config and checks the exit status, that the message names the file, the
user's own column (ours in parentheses) and the row where there is one,
that no Python traceback is shown and that no run folder is left behind.
The audited cases check the counts of the daily audit and of the panel.

Where an expected value is a fact of the trade it is marked "common
practice": a k-for-1 split divides the price by k and multiplies the volume
by k; a day without a trade has no price; a close-to-close return is
close_t / close_{t-1} - 1 (with a split, close_t x k / close_{t-1} - 1).
"""

from __future__ import annotations

import gzip
import math
from pathlib import Path

import polars as pl
import pytest
import yaml

from liqpanel import cli, ingest
from liqpanel.bars import daily_file as dailyfile
from liqpanel.panel import coverage, read_characteristics, read_monthly_returns
from liqpanel.config import validate_config
from liqpanel.bars.daily_job import read_daily_file
from liqpanel.clean.job import run_clean
from liqpanel.clean.job import check_inputs
from liqpanel.core.settings import for_job

REPO = Path(__file__).resolve().parents[1]
# a vendor layout of our own: the user's names on the left, ours on the right
DAILY_MAP = {"Sym": "security", "TradeDate": "date", "OpenPx": "open", "HighPx": "high", "LowPx": "low",
             "LastPx": "close", "Qty": "volume"}
HEADER = "Sym,TradeDate,OpenPx,HighPx,LowPx,LastPx,Qty"


def _days(securities=("QOLM", "TARV", "WENK", "PIXO", "LUDA"), start=20210104, n=40):
    """Clean rows of an invented market: weekdays from 2021-01-04, prices drifting gently."""
    import datetime as dt

    rows, day = [], dt.date(start // 10000, start // 100 % 100, start % 100)
    dates = []
    while len(dates) < n:
        if day.weekday() < 5:
            dates.append(day)
        day += dt.timedelta(days=1)
    for s, sec in enumerate(securities):
        for i, d in enumerate(dates):
            close = 10.0 + s + 0.05 * ((i * 7 + s) % 5) + 0.01 * i
            rows.append((sec, d.strftime("%Y%m%d"), close - 0.02, close + 0.05, close - 0.06, close, 1000 + 10 * i))
    return rows


def _write_daily(path: Path, rows, header=HEADER) -> Path:
    path.write_text(header + "\n" + "".join(",".join(str(v) for v in r) + "\n" for r in rows))
    return path


def _config(tmp_path: Path, **overrides) -> Path:
    """A tiny daily-file config in tmp_path; ``overrides`` replace top-level sections (inputs merged)."""
    daily = tmp_path / "daily.csv"
    if not daily.exists():
        _write_daily(daily, _days())
    config = {
        "run": {"name": "bad-input", "results_dir": str(tmp_path / "results"), "work_dir": str(tmp_path / "work"),
                "engine_threads": 1},
        "sample": {"start": "2021-01", "end": "2021-02"},
        "market": "demo",
        "inputs": {"daily": str(daily)},
        "columns": {"daily": DAILY_MAP},
        "measures": {"roll_spread": {"convention": "missing"}, "amihud": {}},
    }
    for key, value in overrides.items():
        config[key] = {**config[key], **value} if key == "inputs" else value
    path = tmp_path / "config.yaml"
    path.write_text(yaml.safe_dump(config))
    return path


def _stops(capsys, config: Path, *needles: str) -> str:
    """Run and check: exit status 2, every needle in the message, no traceback, no run folder."""
    code = cli.main(["run", "--config", str(config), "--cores", "1", "--quiet", "rules"])
    out = capsys.readouterr()
    text = out.out + out.err
    assert code == 2, text
    for needle in needles:
        assert needle in text, (needle, text)
    assert "Traceback" not in text
    results = config.parent / "results"
    assert not results.exists() or not [p for p in results.iterdir() if not p.name.startswith(".")], text
    return text


# --- the daily file: stops before any job -------------------------------------------------------


def test_ambiguous_day_month_order_is_refused(tmp_path, capsys):
    rows = [(r[0], f"{r[1][6:]}/{r[1][4:6]}/{r[1][:4]}", *r[2:]) for r in _days()]
    _write_daily(tmp_path / "daily.csv", rows)
    _stops(capsys, _config(tmp_path), "daily.csv", "'TradeDate' (date)", "data row 1", "'04/01/2021'", "date_format")


def test_a_given_date_format_reads_day_first_dates(tmp_path):
    rows = [(r[0], f"{r[1][6:]}/{r[1][4:6]}/{r[1][:4]}", *r[2:]) for r in _days()]
    _write_daily(tmp_path / "daily.csv", rows)
    config = validate_config(yaml.safe_load(_config(tmp_path, formats={"daily": {"date_format": "%d/%m/%Y"}}).read_text()))
    daily = read_daily_file(config["inputs"]["daily"], DAILY_MAP, **for_job(config, read_daily_file)).collect()
    # 04/01/2021 with "%d/%m/%Y" is 4 January 2021 (strftime, common practice)
    assert str(daily["date"].min()) == "2021-01-04"


def test_integer_dates_are_yyyymmdd_never_days_since_1970(tmp_path):
    path = tmp_path / "d.parquet"
    pl.DataFrame(_days(n=25), schema=list(DAILY_MAP), orient="row").with_columns(
        pl.col("TradeDate").cast(pl.Int64)).write_parquet(path)
    daily = read_daily_file(str(path), DAILY_MAP).collect()
    # 20210104 as YYYYMMDD is 4 January 2021; as days since 1970 it would be in the year 57303
    assert str(daily["date"].min()) == "2021-01-04"
    assert daily.group_by("month").len().sort("month")["len"].to_list() == [5 * 20, 5 * 5]


def test_unparseable_date_names_row_and_value(tmp_path, capsys):
    rows = _days()
    rows[6] = (rows[6][0], "2021-13-45", *rows[6][2:])
    _write_daily(tmp_path / "daily.csv", rows)
    _stops(capsys, _config(tmp_path), "daily.csv", "'TradeDate' (date)", "data row 7", "'2021-13-45'")


def test_unparseable_price_names_the_users_column(tmp_path, capsys):
    rows = _days()
    rows[11] = (*rows[11][:5], "12.5x", rows[11][6])
    _write_daily(tmp_path / "daily.csv", rows)
    _stops(capsys, _config(tmp_path), "daily.csv", "'LastPx' (close)", "data row 12", "'12.5x'")


def test_whole_numbers_in_the_first_rows_do_not_fix_the_type(tmp_path):
    rows = [(*r[:5], 12, r[6]) for r in _days(n=40)]  # first 200 closes are whole numbers
    rows += [("ZUMA", "20210104", 12.3, 12.5, 12.2, "12.3400", 900)]
    _write_daily(tmp_path / "daily.csv", rows)
    daily = read_daily_file(str(tmp_path / "daily.csv"), DAILY_MAP).collect()
    assert daily.filter(pl.col("security") == "ZUMA")["close"].to_list() == [12.34]


def test_mapped_column_absent_names_the_users_name(tmp_path, capsys):
    _write_daily(tmp_path / "daily.csv", _days(), header=HEADER.replace("LastPx", "ClosePx"))
    _stops(capsys, _config(tmp_path), "daily.csv", "'LastPx'", "no such column", "ClosePx")


def test_required_column_absent_says_how_to_map_it(tmp_path, capsys):
    _write_daily(tmp_path / "daily.csv", [r[:6] for r in _days()], header=HEADER.rsplit(",", 1)[0])
    cfg = _config(tmp_path, columns={"daily": {k: v for k, v in DAILY_MAP.items() if k != "Qty"}})
    _stops(capsys, cfg, "daily.csv", "'volume'", "columns.daily")


def test_empty_daily_file(tmp_path, capsys):
    (tmp_path / "daily.csv").write_text("")
    _stops(capsys, _config(tmp_path), "daily.csv", "empty")


def test_header_only_daily_file(tmp_path, capsys):
    _write_daily(tmp_path / "daily.csv", [])
    _stops(capsys, _config(tmp_path), "daily.csv", "no data rows")


def test_missing_daily_file(tmp_path, capsys):
    _stops(capsys, _config(tmp_path, inputs={"daily": str(tmp_path / "nowhere.csv")}), "nowhere.csv", "no such file")


def test_unsupported_file_type(tmp_path, capsys):
    (tmp_path / "daily.xlsx").write_bytes(b"PK\x03\x04")
    _stops(capsys, _config(tmp_path, inputs={"daily": str(tmp_path / "daily.xlsx")}), "daily.xlsx", "unsupported")


def test_truncated_gzip_names_the_file(tmp_path, capsys):
    full = gzip.compress((HEADER + "\n" + "".join(",".join(map(str, r)) + "\n" for r in _days())).encode())
    path = tmp_path / "daily.csv.gz"
    path.write_bytes(full[: len(full) // 2])
    _stops(capsys, _config(tmp_path, inputs={"daily": str(path)}), "daily.csv.gz", "cannot read")


def test_corrupt_parquet_names_the_file(tmp_path, capsys):
    path = tmp_path / "daily.parquet"
    pl.DataFrame(_days(), schema=list(DAILY_MAP), orient="row").write_parquet(path)
    data = bytearray(path.read_bytes())
    data[8:400] = b"\x00" * 392  # the first column chunk, behind the magic bytes
    path.write_bytes(bytes(data))
    _stops(capsys, _config(tmp_path, inputs={"daily": str(path)}), "daily.parquet", "cannot read")


def test_vendor_returns_with_adjustments_stop_saying_why(tmp_path, capsys):
    rows = [(*r, "0.001") for r in _days()]
    _write_daily(tmp_path / "daily.csv", rows, header=HEADER + ",DayRet")
    (tmp_path / "adj.csv").write_text("security,date,split_ratio\nQOLM,2021-01-20,2\n")
    cfg = _config(tmp_path, inputs={"adjustments": str(tmp_path / "adj.csv")},
                  columns={"daily": {**DAILY_MAP, "DayRet": "ret"}})
    _stops(capsys, cfg, "daily.csv", "'DayRet' (ret)", "already adjusted")


# --- other inputs: stop before any job ------------------------------------------------------------


def test_returns_with_a_text_month_name_the_row(tmp_path, capsys):
    (tmp_path / "ret.csv").write_text("Ticker,Period,Ret\nQOLM,2021-01,0.01\nQOLM,March 2021,0.02\n")
    cfg = _config(tmp_path, inputs={"returns": str(tmp_path / "ret.csv")},
                  columns={"daily": DAILY_MAP, "returns": {"Ticker": "security", "Period": "month", "Ret": "ret"}})
    _stops(capsys, cfg, "ret.csv", "'Period' (month)", "data row 2", "'March 2021'")


def test_returns_with_an_unparseable_return(tmp_path, capsys):
    (tmp_path / "ret.csv").write_text("security,month,ret\nQOLM,202101,0.01\nQOLM,202102,1.2.3\n")
    cfg = _config(tmp_path, inputs={"returns": str(tmp_path / "ret.csv")})
    _stops(capsys, cfg, "ret.csv", "'ret'", "data row 2", "'1.2.3'")


def test_returns_in_percent_read_as_decimals_stop_naming_the_row(tmp_path, capsys):
    # A simple return is -1 at the lowest (limited liability, common practice):
    # -3.5 is a file in percent read as decimals.
    (tmp_path / "ret.csv").write_text("security,month,ret\nQOLM,202101,1.2\nQOLM,202102,-3.5\nQOLM,202103,-7\n")
    cfg = _config(tmp_path, inputs={"returns": str(tmp_path / "ret.csv")})
    _stops(capsys, cfg, "ret.csv", "'ret'", "data row 2", "-3.5", "2 rows like this", "returns_in: percent")


def test_returns_in_percent_are_read_as_decimals_when_declared(tmp_path):
    (tmp_path / "ret.csv").write_text("security,month,ret\nQOLM,202101,1.2\nQOLM,202102,-3.5\n")
    layout = ingest.layout_from("returns", str(tmp_path / "ret.csv"), {}, {"returns_in": "percent"})
    got = read_monthly_returns(layout).collect()
    assert got["ret"].to_list() == pytest.approx([0.012, -0.035])


def test_daily_returns_in_percent_stop_at_the_pre_flight(tmp_path, capsys):
    rows = [(*r, ret) for r, ret in zip(_days(n=20), [0.5, -1.5] * 50)]
    _write_daily(tmp_path / "daily.csv", rows, header=HEADER + ",DayRet")
    cfg = _config(tmp_path, columns={"daily": {**DAILY_MAP, "DayRet": "ret"}})
    _stops(capsys, cfg, "daily.csv", "'DayRet' (ret)", "data row 2", "-1.5", "formats.daily")


def test_returns_keyed_by_another_identifier_stop_naming_both(tmp_path, capsys):
    (tmp_path / "ret.csv").write_text("Permno,month,ret\n10001,202101,0.01\n10002,202101,0.02\n")
    cfg = _config(tmp_path, inputs={"returns": str(tmp_path / "ret.csv")},
                  columns={"daily": DAILY_MAP, "returns": {"Permno": "security"}})
    _stops(capsys, cfg, "ret.csv", "column 'Permno'", "no security of the monthly returns file", "'10001' in the file",
           "'LUDA' in the measures")


def test_characteristics_keyed_by_another_identifier_stop(tmp_path, capsys):
    inputs = _chars(tmp_path, "security,date,bm\nX1,2021-01-29,0.5\n")
    _stops(capsys, _config(tmp_path, inputs=inputs), "chars.csv", "characteristics file 'book'", "'X1' in the file")


def test_returns_mapping_names_a_column_the_file_lacks(tmp_path, capsys):
    (tmp_path / "ret.csv").write_text("security,month,ret\nQOLM,202101,0.01\n")
    cfg = _config(tmp_path, inputs={"returns": str(tmp_path / "ret.csv")},
                  columns={"daily": DAILY_MAP, "returns": {"TotRet": "ret"}})
    _stops(capsys, cfg, "ret.csv", "'TotRet'")


def test_returns_header_only(tmp_path, capsys):
    (tmp_path / "ret.csv").write_text("security,month,ret\n")
    _stops(capsys, _config(tmp_path, inputs={"returns": str(tmp_path / "ret.csv")}), "ret.csv", "no data rows")


def _chars(tmp_path, text, **entry):
    (tmp_path / "chars.csv").write_text(text)
    return {"characteristics": [{"name": "book", "path": str(tmp_path / "chars.csv"), "variables": ["bm"], **entry}]}


def test_characteristics_text_date_names_file_column_row(tmp_path, capsys):
    inputs = _chars(tmp_path, "Firm,AsOf,BM\nQOLM,2020-12-31,0.5\nTARV,Dec 2020,0.7\n",
                    columns={"Firm": "security", "AsOf": "date", "BM": "bm"})
    _stops(capsys, _config(tmp_path, inputs=inputs), "chars.csv", "'AsOf' (date)", "data row 2", "'Dec 2020'")


def test_characteristics_unparseable_variable(tmp_path, capsys):
    inputs = _chars(tmp_path, "security,date,bm\nQOLM,20201231,0.5\nTARV,20201231,high\n")
    _stops(capsys, _config(tmp_path, inputs=inputs), "chars.csv", "'bm'", "data row 2", "'high'")


def test_characteristics_mapping_names_a_column_the_file_lacks(tmp_path, capsys):
    inputs = _chars(tmp_path, "security,date,bm\nQOLM,20201231,0.5\n", columns={"BookToMkt": "bm"})
    _stops(capsys, _config(tmp_path, inputs=inputs), "chars.csv", "'BookToMkt'")


def test_characteristics_ambiguous_date(tmp_path, capsys):
    inputs = _chars(tmp_path, "security,date,bm\nQOLM,12/11/2020,0.5\n")
    _stops(capsys, _config(tmp_path, inputs=inputs), "chars.csv", "'date'", "data row 1", "date_format")


@pytest.mark.parametrize("second_row, column, value", [
    ("2021/02,0.02", "'Mon' (month)", "'2021/02'"),   # a month in no recognised form
    ("202102,n/a?", "'MKT' (mkt)", "'n/a?'"),          # a factor return that is not a number
])
def test_factor_file_rows_that_do_not_parse(tmp_path, capsys, second_row, column, value):
    (tmp_path / "f.csv").write_text(f"Mon,MKT\n2021-01,0.01\n{second_row}\n")
    cfg = _config(tmp_path, inputs={"factors": str(tmp_path / "f.csv")},
                  columns={"daily": DAILY_MAP, "factors": {"Mon": "month", "MKT": "mkt"}})
    _stops(capsys, cfg, "f.csv", column, "data row 2", value)


def test_truth_with_a_bad_month(tmp_path, capsys):
    (tmp_path / "t.csv").write_text("security,month,spread\nQOLM,Jan-21,0.01\n")
    _stops(capsys, _config(tmp_path, inputs={"truth": str(tmp_path / "t.csv")}), "t.csv", "'month'", "data row 1")


def test_adjustments_with_an_unparseable_ratio(tmp_path, capsys):
    (tmp_path / "adj.csv").write_text("Ticker,ExDate,Ratio\nQOLM,20210120,2\nTARV,20210121,two\n")
    cfg = _config(tmp_path, inputs={"adjustments": str(tmp_path / "adj.csv")},
                  columns={"daily": DAILY_MAP, "adjustments": {"Ticker": "security", "ExDate": "date", "Ratio": "split_ratio"}})
    _stops(capsys, cfg, "adj.csv", "'Ratio' (split_ratio)", "data row 2", "'two'")


def test_adjustments_with_a_zero_ratio(tmp_path, capsys):
    (tmp_path / "adj.csv").write_text("security,date,split_ratio\nQOLM,2021-01-20,0\n")
    _stops(capsys, _config(tmp_path, inputs={"adjustments": str(tmp_path / "adj.csv")}), "adj.csv",
           "'split_ratio'", "data row 1", "positive")


def test_adjustments_with_an_ambiguous_date(tmp_path, capsys):
    (tmp_path / "adj.csv").write_text("security,date,split_ratio\nQOLM,05/06/2021,2\n")
    _stops(capsys, _config(tmp_path, inputs={"adjustments": str(tmp_path / "adj.csv")}), "adj.csv",
           "'date'", "data row 1", "'05/06/2021'")


def _trade_config(tmp_path, trades: Path, **extra) -> Path:
    config = {
        "run": {"results_dir": str(tmp_path / "results"), "work_dir": str(tmp_path / "work"), "engine_threads": 1},
        "sample": {"start": "2021-03", "end": "2021-03"}, "market": "demo",
        "inputs": {"trades": str(trades)}, "columns": {"trades": {"SYM": "security", "STAMP": "ts", "PX": "price",
                                                                   "QTY": "size"}},
        "measures": {"amihud": {}}, **extra,
    }
    path = tmp_path / "config.yaml"
    path.write_text(yaml.safe_dump(config))
    return path


def test_header_only_trade_file_stops(tmp_path, capsys):
    (tmp_path / "t.csv").write_text("SYM,STAMP,PX,QTY\n")
    _stops(capsys, _trade_config(tmp_path, tmp_path / "t.csv"), "t.csv", "no data rows")


def test_trade_mapping_names_a_column_the_file_lacks(tmp_path, capsys):
    (tmp_path / "t.csv").write_text("SYM,STAMP,PRICE,QTY\nQOLM,2021-03-01 10:00:00,10,100\n")
    _stops(capsys, _trade_config(tmp_path, tmp_path / "t.csv"), "t.csv", "'PX'")


# --- stops inside a workflow job: the message still reaches the user as one line ---------------


@pytest.mark.slow
def test_duplicate_days_stop_by_default_naming_the_rows(tmp_path, capsys):
    rows = _days()
    rows.insert(3, rows[2])
    _write_daily(tmp_path / "daily.csv", rows)
    text = _stops(capsys, _config(tmp_path), "daily.csv", "'TradeDate' (date)", "data rows 3, 4", "keep_first")
    assert "File \"" not in text  # no engine frames


@pytest.mark.slow
def test_corrupt_trade_parquet_names_the_file_from_the_clean_job(tmp_path, capsys):
    trades = pl.DataFrame({
        "SYM": ["QOLM"] * 400, "STAMP": [f"2021-03-01 10:{i // 60:02d}:{i % 60:02d}" for i in range(400)],
        "PX": [10.0 + (i % 7) * 0.01 for i in range(400)], "QTY": [100.0] * 400,
    })
    path = tmp_path / "t.parquet"
    trades.write_parquet(path, compression="uncompressed")
    data = bytearray(path.read_bytes())
    data[100:3000] = b"\xff" * 2900  # column pages behind the magic bytes, footer intact
    path.write_bytes(bytes(data))
    _stops(capsys, _trade_config(tmp_path, path), "t.parquet", "cannot read")


# --- audited cases: rows dropped or repaired are counted ---------------------------------------


def _settings(**daily):
    return {"duplicates": "error", "bad_range": "drop_range", "unparseable": "error", **daily}


def _read(path, settings=None, sample=("2021-01", "2021-02"), adjustments=None, mapping=DAILY_MAP):
    layout = ingest.layout_from("daily", str(path), mapping, None)
    return dailyfile.read_daily(layout, settings or _settings(), sample, adjustments)


def _totals(audit: pl.DataFrame) -> dict:
    return audit.select(pl.exclude("security", "month").sum()).row(0, named=True)


def test_planted_defects_are_each_counted_and_the_audit_balances(tmp_path):
    rows = _days()  # 200 clean rows
    planted = [
        ("", "20210105", 10, 10.1, 9.9, 10, 5),                       # missing_key (no security)
        ("QOLM", "20201231", 10, 10.1, 9.9, 10, 5),                   # outside_sample
        rows[7],                                                      # duplicate of row 8
        ("TARV", "20210315", 10, 10.1, 9.9, 10, 5),                   # outside_sample (after the end)
        ("KOVA", "20210104", 10, 10.1, 9.9, "inf", 5),                # non_finite close
        ("KOVA", "20210105", "", "", "", "", 0),                      # no_trade
        ("KOVA", "20210106", 10, 10.1, 9.9, -10, 5),                  # nonpositive_price
        ("KOVA", "20210107", 10, 10.1, 9.9, 10, -5),                  # negative_volume
        ("KOVA", "20210108", 10, 9.5, 9.9, 10, 5),                    # bad_range: high < low (repaired)
    ]
    _write_daily(tmp_path / "d.csv", rows + planted)
    read = _read(tmp_path / "d.csv", _settings(duplicates="keep_first"))
    t = _totals(read.audit)
    assert t["rows_read"] == 209
    assert (t["drop_missing_key"], t["drop_outside_sample"], t["drop_duplicate"], t["drop_non_finite"]) == (1, 2, 1, 1)
    assert (t["drop_no_trade"], t["drop_nonpositive_price"], t["drop_negative_volume"]) == (1, 1, 1)
    assert (t["drop_bad_range"], t["repaired_range"]) == (0, 1)
    assert t["rows_kept"] == 201 == read.daily.height
    assert t["rows_read"] == t["rows_kept"] + sum(t[f"drop_{r}"] for r in dailyfile.RULES)
    repaired = read.daily.filter(pl.col("security") == "KOVA").row(0, named=True)
    assert (repaired["open"], repaired["high"], repaired["low"], repaired["close"]) == (None, None, None, 10.0)
    # the same file with the day dropped instead of its range cleared
    day = _totals(_read(tmp_path / "d.csv", _settings(duplicates="keep_first", bad_range="drop_day")).audit)
    assert (day["drop_bad_range"], day["repaired_range"], day["rows_kept"]) == (1, 0, 200)


def test_duplicate_policies_count_what_they_drop(tmp_path):
    rows = _days()
    _write_daily(tmp_path / "d.csv", rows + [rows[0], rows[0], rows[40]])
    keep = _read(tmp_path / "d.csv", _settings(duplicates="keep_first"))
    drop = _read(tmp_path / "d.csv", _settings(duplicates="drop_all"))
    assert _totals(keep.audit)["drop_duplicate"] == 3 and keep.daily.height == 200
    assert _totals(drop.audit)["drop_duplicate"] == 5 and drop.daily.height == 198
    # keep_first gives the table of the file without the copies
    assert keep.daily.equals(_read(_write_daily(tmp_path / "clean.csv", rows)).daily)


def test_a_no_trade_row_gives_the_same_table_as_an_omitted_day(tmp_path):
    rows = _days()
    omitted = [r for i, r in enumerate(rows) if i != 10]
    said = [r if i != 10 else (r[0], r[1], "", "", "", "", 0) for i, r in enumerate(rows)]
    a = _read(_write_daily(tmp_path / "a.csv", omitted))
    b = _read(_write_daily(tmp_path / "b.csv", said))
    assert a.daily.equals(b.daily)
    assert _totals(b.audit)["drop_no_trade"] == 1 and _totals(a.audit)["rows_read"] == 199
    # the return across the gap is close_t / close_{t-2} - 1 (common practice), not missing
    q = a.daily.filter(pl.col("security") == "QOLM")
    assert q["ret"].null_count() == 1  # only the first day


def test_a_split_is_adjusted_on_the_daily_path(tmp_path):
    rows = _days(securities=("QOLM",), n=30)
    split_day = rows[15][1]
    rows = [r if r[1] < split_day else (r[0], r[1], r[2] / 2, r[3] / 2, r[4] / 2, r[5] / 2, r[6] * 2) for r in rows]
    _write_daily(tmp_path / "d.csv", rows)
    adjustments = pl.DataFrame({"security": ["QOLM"], "date": [pl.Series([split_day]).str.to_date("%Y%m%d")[0]],
                                "split_ratio": [2.0], "dividend": [0.0]})
    unadjusted = _read(tmp_path / "d.csv").daily
    adjusted = _read(tmp_path / "d.csv", adjustments=adjustments).daily
    day = pl.col("date") == adjustments["date"][0]
    # 2:1 split: close_t x 2 / close_{t-1} - 1 (common practice)
    expected = rows[15][5] * 2 / rows[14][5] - 1
    assert adjusted.filter(day)["ret"][0] == pytest.approx(expected, rel=1e-12)
    assert unadjusted.filter(day)["ret"][0] == pytest.approx(rows[15][5] / rows[14][5] - 1, rel=1e-12)
    # prices before the ex-date are divided by 2 and volumes doubled, so the series has no step
    before = adjusted.filter(pl.col("date") < adjustments["date"][0])
    assert before["close"][0] == pytest.approx(rows[0][5] / 2) and before["volume"][0] == rows[0][6] * 2
    # the unadjusted file shows the day as a suspected 2:1 split; the adjusted one does not
    assert _read(tmp_path / "d.csv").splits.select("date", "suspected_split").rows() == [
        (adjustments["date"][0], "2:1")]
    assert _read(tmp_path / "d.csv", adjustments=adjustments).splits.height == 0


def test_daily_example_audit_balances_and_keeps_every_row():
    mapping = yaml.safe_load((REPO / "config" / "daily_example.yaml").read_text())["columns"]["daily"]
    read = _read(REPO / "demo_data" / "daily_example.csv.gz", sample=("2021-01", "2022-12"), mapping=mapping)
    t = _totals(read.audit)
    rows = sum(1 for _ in gzip.open(REPO / "demo_data" / "daily_example.csv.gz", "rt")) - 1  # minus the header
    assert t["rows_read"] == rows == t["rows_kept"] == read.daily.height
    assert read.splits.height == 0


def test_unparseable_rows_can_be_dropped_and_counted(tmp_path):
    rows = _days()
    rows[5] = (*rows[5][:5], "n.a.", rows[5][6])
    _write_daily(tmp_path / "d.csv", rows)
    t = _totals(_read(tmp_path / "d.csv", _settings(unparseable="drop")).audit)
    assert (t["drop_unparseable"], t["rows_kept"]) == (1, 199)


def test_nan_tokens_and_non_finite_optional_values(tmp_path):
    rows = [(*r, "NaN" if i == 3 else ("-inf" if i == 4 else "1e6")) for i, r in enumerate(_days())]
    _write_daily(tmp_path / "d.csv", rows, header=HEADER + ",Shares")
    read = _read(tmp_path / "d.csv", mapping={**DAILY_MAP, "Shares": "shares_out"})
    t = _totals(read.audit)
    # the token NaN is a missing value; -inf is a non-finite number, made missing and counted
    assert (t["rows_kept"], t["repaired_non_finite"]) == (200, 1)
    assert read.daily["shares_out"].null_count() == 2
    assert not any(read.daily.select(pl.col(pl.Float64).is_infinite().any()).row(0))


def test_non_finite_returns_become_missing_and_show_in_coverage(tmp_path):
    path = tmp_path / "r.parquet"
    pl.DataFrame({"security": ["QOLM", "TARV", "WENK", "PIXO"], "month": [202102] * 4,
                  "ret": [0.01, math.inf, float("nan"), -0.02]}).write_parquet(path)
    returns = read_monthly_returns(str(path)).collect()
    assert returns["ret"].null_count() == 2 and returns["ret"].is_infinite().sum() == 0
    panel = returns.with_columns(pl.col("month").dt.offset_by("-1mo"), pl.col("ret").alias("ret_next"))
    # two of four securities have no usable next-month return
    assert coverage(panel, ["ret_next"])["missing_ret_next"].to_list() == [0.5]


def test_characteristics_integer_date_is_public_in_its_month(tmp_path):
    (tmp_path / "c.csv").write_text("Firm;AsOf;BM\nQOLM;20201231;0,5\nTARV;20201231;n/a\n")
    entry = {"name": "book", "path": str(tmp_path / "c.csv"), "variables": ["bm"], "date_column": "date",
             "columns": {"Firm": "security", "AsOf": "date", "BM": "bm"},
             "format": {"separator": ";", "missing": ["n/a"]}}
    with pytest.raises(Exception, match="'BM' \\(bm\\), data row 1.*'0,5'"):
        read_characteristics(entry)  # a decimal comma is not a number
    (tmp_path / "c.csv").write_text("Firm;AsOf;BM\nQOLM;20201231;0.5\nTARV;20201231;n/a\n")
    frame = read_characteristics(entry)
    assert [str(d) for d in frame["date"]] == ["2020-12-31", "2020-12-31"]
    assert frame["bm"].to_list() == [0.5, None]


def _trades_csv(path: Path, prices: list[str]) -> Path:
    stamps = [f"2021-03-0{1 + i // 4} {10 + i % 4}:00:00" for i in range(len(prices))]
    path.write_text("SYM,STAMP,PX,QTY\n" + "".join(f"QOLM,{s},{p},100\n" for s, p in zip(stamps, prices)))
    return path


@pytest.mark.parametrize("kind", ["csv", "parquet"])
def test_nan_trade_price_is_a_missing_field_in_the_audit(tmp_path, kind):
    prices = ["10.00", "10.02", "NaN", "10.01", "10.03", "10.02", "10.04", "10.03"]
    path = _trades_csv(tmp_path / "t.csv", prices)
    if kind == "parquet":
        frame = pl.read_csv(path, infer_schema=False).with_columns(pl.col("PX").cast(pl.Float64))
        path = tmp_path / "t.parquet"
        frame.write_parquet(path)
        assert frame["PX"].is_nan().sum() == 1
    config = validate_config(yaml.safe_load(_trade_config(tmp_path, path, clean={"outliers": None}).read_text()))
    run_clean("2021-03", str(tmp_path / "c.parquet"), str(tmp_path / "a.parquet"), **for_job(config, run_clean))
    audit = pl.read_parquet(tmp_path / "a.parquet").filter(pl.col("table") == "trades")
    assert audit["rows_read"].sum() == 8 and audit["drop_missing_field"].sum() == 1 and audit["rows_kept"].sum() == 7
    assert pl.read_parquet(tmp_path / "c.parquet")["price"].is_nan().sum() == 0


def test_truncated_gzip_trade_file_names_the_file(tmp_path, capsys):
    text = "SYM,STAMP,PX,QTY\n" + "".join(f"QOLM,2021-03-01 10:{i // 60:02d}:{i % 60:02d},10.0{i % 9},100\n"
                                          for i in range(2000))
    full = gzip.compress(text.encode())
    (tmp_path / "t.csv.gz").write_bytes(full[: len(full) * 2 // 3])
    _stops(capsys, _trade_config(tmp_path, tmp_path / "t.csv.gz"), "t.csv.gz", "cannot read")


def test_time_format_and_separator_of_a_trade_file(tmp_path):
    from liqpanel.clean.reading import TRADES_SPEC, read_table

    (tmp_path / "t.csv").write_text("SYM|DAY|CLOCK|PX|QTY\nQOLM|03/01/2021|10h30m05|10.5|100\n")
    mapping = {"SYM": "security", "DAY": "date", "CLOCK": "time", "PX": "price", "QTY": "size"}
    fmt = {"date_format": "%m/%d/%Y", "time_format": "%Hh%Mm%S", "separator": "|"}
    frame = read_table(str(tmp_path / "t.csv"), mapping, TRADES_SPEC, "UTC", fmt=fmt).frame.collect()
    # 03/01/2021 read month first is 1 March 2021; 10h30m05 is 10:30:05 (strftime, common practice)
    assert str(frame["ts"][0]) == "2021-03-01 10:30:05+00:00" and frame["_bad"][0] is None


def test_sample_check_lists_problems_without_raising(tmp_path):
    (tmp_path / "d.csv").write_text("Sym,TradeDate\nQOLM,07/08/2021\n")
    problems = ingest.sample_check("daily", str(tmp_path / "d.csv"), {"Sym": "security", "TradeDate": "date"})
    assert len(problems) == 1 and "'TradeDate' (date)" in problems[0] and "'07/08/2021'" in problems[0]
    fmt = {"date_format": "%d/%m/%Y"}
    assert ingest.sample_check("daily", str(tmp_path / "d.csv"), {"Sym": "security", "TradeDate": "date"}, fmt) == []
    assert "no such file" in ingest.sample_check("returns", str(tmp_path / "none.csv"))[0]


def test_a_day_before_the_sample_gives_the_first_return_its_previous_close(tmp_path):
    rows = _days(securities=("QOLM",), start=20201228, n=30)  # four days of December 2020 first
    _write_daily(tmp_path / "d.csv", rows)
    read = _read(tmp_path / "d.csv")
    assert _totals(read.audit)["drop_outside_sample"] == 4
    first = read.daily.row(0, named=True)
    # close-to-close return from the last December close (common practice)
    assert str(first["date"]) == "2021-01-01"  # a Friday; the invented calendar has no holidays
    assert first["ret"] == pytest.approx(rows[4][5] / rows[3][5] - 1, rel=1e-12)


def test_unparseable_rows_dropped_by_policy_do_not_stop_the_check(tmp_path):
    rows = _days()
    rows[3] = (rows[3][0], "someday", *rows[3][2:])
    _write_daily(tmp_path / "daily.csv", rows)
    config = validate_config(yaml.safe_load(_config(tmp_path, daily={"unparseable": "drop"}).read_text()))
    check_inputs(**for_job(config, check_inputs))  # no error: the row is dropped and counted by the daily job
    assert cli.main(["check-config", str(tmp_path / "config.yaml")]) == 0  # nor from the pre-flight check
    t = _totals(_read(tmp_path / "daily.csv", _settings(unparseable="drop")).audit)
    assert (t["drop_unparseable"], t["rows_kept"]) == (1, 199)


def test_nan_trade_price_with_quotes_is_a_missing_field_not_outside_quotes(tmp_path):
    prices = ["10.00", "10.02", "NaN", "10.01", "10.03", "10.02", "10.04", "10.03"]
    trades = _trades_csv(tmp_path / "t.csv", prices)
    stamps = [f"2021-03-0{d} {h}:00:00" for d in (1, 2) for h in (9, 10, 11, 12, 13)]
    (tmp_path / "q.csv").write_text("SYM,STAMP,BID,ASK\n" + "".join(f"QOLM,{s},9.99,10.05\n" for s in stamps))
    config = validate_config(yaml.safe_load(_trade_config(
        tmp_path, trades, clean={"outliers": None},
        columns={"trades": {"SYM": "security", "STAMP": "ts", "PX": "price", "QTY": "size"},
                 "quotes": {"SYM": "security", "STAMP": "ts", "BID": "bid", "ASK": "ask"}},
    ).read_text()))
    config["inputs"]["quotes"] = str(tmp_path / "q.csv")
    run_clean("2021-03", str(tmp_path / "c.parquet"), str(tmp_path / "a.parquet"), str(tmp_path / "cq.parquet"),
        **for_job(config, run_clean))
    audit = pl.read_parquet(tmp_path / "a.parquet").filter(pl.col("table") == "trades")
    assert (audit["drop_missing_field"].sum(), audit["drop_outside_quotes"].sum(), audit["rows_kept"].sum()) == (1, 0, 7)


def test_truth_value_that_is_not_a_number(tmp_path, capsys):
    (tmp_path / "t.csv").write_text("security,month,spread\nQOLM,2021-01,wide\n")
    _stops(capsys, _config(tmp_path, inputs={"truth": str(tmp_path / "t.csv")}), "t.csv", "'spread'", "'wide'")


def test_characteristics_variable_column_absent(tmp_path, capsys):
    inputs = _chars(tmp_path, "security,date,book\nQOLM,20201231,0.5\n")
    _stops(capsys, _config(tmp_path, inputs=inputs), "chars.csv", "'bm'", "inputs.characteristics[book].columns")


def test_daily_file_without_a_security_column(tmp_path, capsys):
    _write_daily(tmp_path / "daily.csv", [r[1:] for r in _days()], header=HEADER.split(",", 1)[1])
    cfg = _config(tmp_path, columns={"daily": {k: v for k, v in DAILY_MAP.items() if k != "Sym"}})
    _stops(capsys, cfg, "daily.csv", "'security'")


def test_daily_glob_that_matches_nothing(tmp_path, capsys):
    _stops(capsys, _config(tmp_path, inputs={"daily": str(tmp_path / "prices_*.csv")}), "prices_*.csv", "no file matches the pattern")
