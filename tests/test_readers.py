"""Reading any vendor's layout: formats, globs, column mapping, timestamp
forms and time zones, and a clear error for every kind of bad input.

Expected UTC instants are computed with Python's ``zoneinfo`` (the IANA
time-zone database), independently of polars."""

import gzip
from datetime import datetime, timezone
from decimal import Decimal
from zoneinfo import ZoneInfo

import polars as pl
import pytest

from liqpanel.config import load_market, validate_config
from liqpanel.core.errors import InputError
from liqpanel.clean.reading import TRADES_SPEC, read_table, unparseable_error
from liqpanel.clean.job import check_inputs, run_clean
from liqpanel.core.settings import for_job

NEW_YORK = ZoneInfo("America/New_York")
MAPPING = {"INSTR": "security", "STAMP": "ts", "DEAL_PX": "price", "DEAL_QTY": "size"}
ROWS = [("AAA", "2021-03-01 10:00:00", "10.5", "100"), ("BBB", "2021-03-01 10:00:01.250", "20.25", "5")]


def _csv(path, rows=ROWS, header="INSTR,STAMP,DEAL_PX,DEAL_QTY"):
    text = "\n".join([header] + [",".join(r) for r in rows]) + "\n"
    if str(path).endswith(".gz"):
        with gzip.open(path, "wt") as fh:
            fh.write(text)
    else:
        path.write_text(text)
    return path


def _read(path, mapping=MAPPING, tz="America/New_York"):
    scanned = read_table(str(path), mapping, TRADES_SPEC, tz)
    return scanned, scanned.frame.collect()


def _utc(*args, tz=NEW_YORK):
    return datetime(*args, tzinfo=tz).astimezone(timezone.utc)


def test_naive_text_is_read_in_the_market_time_zone(tmp_path):
    scanned, frame = _read(_csv(tmp_path / "t.csv"))
    assert frame["ts"].to_list() == [_utc(2021, 3, 1, 10, 0), _utc(2021, 3, 1, 10, 0, 1, 250000)]
    assert frame["price"].to_list() == [10.5, 20.25] and frame["_bad"].null_count() == 2
    assert "America/New_York" in scanned.describe_timestamps()


def test_glob_of_csv_gzip_and_parquet_reads_every_file(tmp_path):
    _csv(tmp_path / "part1.csv", ROWS[:1])
    _csv(tmp_path / "part2.csv.gz", ROWS[1:])
    _, frame = _read(tmp_path / "part*")
    assert frame["security"].to_list() == ["AAA", "BBB"] and frame["_file"].to_list() == [0, 1]
    pl.DataFrame({"INSTR": ["CCC"], "STAMP": [datetime(2021, 3, 1, 11, 0)], "DEAL_PX": [Decimal("1.25")], "DEAL_QTY": [7]}).write_parquet(
        tmp_path / "p1.parquet"
    )
    _, parquet = _read(tmp_path / "p*.parquet")
    assert parquet.row(0, named=True)["price"] == 1.25  # decimals become floats
    assert parquet["ts"][0] == _utc(2021, 3, 1, 11, 0)


def test_zone_aware_and_offset_timestamps_are_converted(tmp_path):
    aware = pl.DataFrame({"INSTR": ["A"], "STAMP": [datetime(2021, 3, 1, 23, 30)], "DEAL_PX": [1.0], "DEAL_QTY": [1.0]})
    aware = aware.with_columns(pl.col("STAMP").dt.replace_time_zone("Asia/Tokyo"))
    aware.write_parquet(tmp_path / "a.parquet")
    scanned, frame = _read(tmp_path / "a.parquet")
    assert frame["ts"][0] == _utc(2021, 3, 1, 23, 30, tz=ZoneInfo("Asia/Tokyo"))
    assert "Asia/Tokyo" in scanned.describe_timestamps()
    rows = [("A", "2021-03-01T10:00:00+09:00", "1", "1"), ("A", "2021-03-01T01:00:00Z", "1", "1")]
    _, frame = _read(_csv(tmp_path / "o.csv", rows))
    assert frame["ts"].to_list() == [datetime(2021, 3, 1, 1, 0, tzinfo=timezone.utc)] * 2


def test_files_in_different_zones_are_each_read_correctly(tmp_path):
    pl.DataFrame({"INSTR": ["A"], "STAMP": [datetime(2021, 3, 1, 10, 0)], "DEAL_PX": [1.0], "DEAL_QTY": [1.0]}).write_parquet(
        tmp_path / "x1.parquet"
    )
    pl.DataFrame({"INSTR": ["A"], "STAMP": [datetime(2021, 3, 1, 15, 0)], "DEAL_PX": [1.0], "DEAL_QTY": [1.0]}).with_columns(
        pl.col("STAMP").dt.replace_time_zone("UTC")
    ).write_parquet(tmp_path / "x2.parquet")
    scanned, frame = _read(tmp_path / "x*.parquet")
    assert frame["ts"].to_list() == [_utc(2021, 3, 1, 10, 0)] * 2  # 10:00 New York = 15:00 UTC in March (EST)
    assert len(scanned.describe_timestamps().split("; ")) == 2  # both readings stated


def test_date_and_time_columns(tmp_path):
    rows = [("A", "20210301", "09:30:00.5", "1", "1"), ("A", "2021-03-02", "16:00", "1", "1")]
    path = _csv(tmp_path / "d.csv", rows, header="INSTR,DAY,CLOCK,DEAL_PX,DEAL_QTY")
    mapping = {"INSTR": "security", "DAY": "date", "CLOCK": "time", "DEAL_PX": "price", "DEAL_QTY": "size"}
    _, frame = _read(path, mapping)
    assert frame["ts"].to_list() == [_utc(2021, 3, 1, 9, 30, 0, 500000), _utc(2021, 3, 2, 16, 0)]


def test_mixed_naive_and_offset_text_is_refused_at_the_first_differing_row(tmp_path):
    rows = [("A", "2021-03-01 10:00:00", "1", "1"), ("A", "2021-03-01 10:00:01", "1", "1"),
            ("A", "2021-03-01 15:00:02+00:00", "1", "1")]
    scanned, frame = _read(_csv(tmp_path / "m.csv", rows))
    error = unparseable_error(frame, scanned.files, "trades")
    assert "m.csv" in str(error) and "column 'ts'" in str(error) and "data row 3" in str(error)


def test_a_local_time_skipped_by_the_clock_change_is_flagged(tmp_path):
    # 2021-03-14 02:30 does not exist in New York (clocks jump from 02:00 to 03:00; IANA database)
    rows = [("A", "2021-03-14 02:30:00", "1", "1"), ("A", "2021-03-14 03:30:00", "1", "1")]
    _, frame = _read(_csv(tmp_path / "dst.csv", rows))
    assert frame["_bad"].to_list() == ["ts", None]
    assert frame["ts"][1] == _utc(2021, 3, 14, 3, 30)


def test_unparseable_timestamp_and_price_name_file_column_and_row(tmp_path):
    rows = [("A", "2021-03-01 10:00:00", "1", "1"), ("A", "yesterday", "1", "1"), ("A", "2021-03-01 10:00:02", "x", "1")]
    scanned, frame = _read(_csv(tmp_path / "u.csv", rows))
    first = unparseable_error(frame, scanned.files, "trades")
    assert "'yesterday'" in str(first) and "column 'ts'" in str(first) and "data row 2" in str(first)
    assert frame["_bad"].to_list() == [None, "ts", "price"]


@pytest.mark.parametrize(
    "header,mapping,needle",
    [
        ("INSTR,STAMP,DEAL_PX,DEAL_QTY", {**MAPPING, "VENUE": "venue"}, "column 'VENUE'"),  # mapped column absent
        ("INSTR,STAMP,DEAL_PX,VOL", MAPPING, "column 'DEAL_QTY'"),
        ("INSTR,STAMP,DEAL_QTY", {"INSTR": "security", "STAMP": "ts", "DEAL_QTY": "size"}, "column 'price'"),
        ("INSTR,DEAL_PX,DEAL_QTY", {"INSTR": "security", "DEAL_PX": "price", "DEAL_QTY": "size"}, "'ts' or two columns 'date' and 'time'"),
    ],
)
def test_schema_problems_are_reported_at_once(tmp_path, header, mapping, needle):
    path = _csv(tmp_path / "s.csv", [("A", "2021-03-01 10:00:00", "1")] if header.count(",") == 2 else ROWS, header)
    with pytest.raises(InputError) as info:
        read_table(str(path), mapping, TRADES_SPEC, "America/New_York")
    assert needle in str(info.value) and "s.csv" in str(info.value)


def test_wrong_kind_of_column_and_empty_file(tmp_path):
    pl.DataFrame({"INSTR": ["A"], "STAMP": [datetime(2021, 3, 1)], "DEAL_PX": [True], "DEAL_QTY": [1]}).write_parquet(tmp_path / "b.parquet")
    with pytest.raises(InputError, match=r"column 'DEAL_PX' \(price\): expected numbers"):
        read_table(str(tmp_path / "b.parquet"), MAPPING, TRADES_SPEC, "UTC")
    (tmp_path / "e.csv").write_text("")
    with pytest.raises(InputError, match="e.csv: the file is empty"):
        read_table(str(tmp_path / "e.csv"), MAPPING, TRADES_SPEC, "UTC")
    with pytest.raises(InputError, match="no such file"):
        read_table(str(tmp_path / "none*.csv"), MAPPING, TRADES_SPEC, "UTC")


def _config(tmp_path, trades, quotes=None):
    return validate_config(
        {
            "sample": {"start": "2021-03", "end": "2021-03"},
            "market": "demo",
            "inputs": {"trades": str(trades), "quotes": str(quotes) if quotes else None},
            "columns": {"trades": MAPPING},
            "measures": {"amihud": None},
        }
    )


def test_header_only_file_gives_an_empty_partition(tmp_path):
    path = _csv(tmp_path / "h.csv", [])
    run_clean("2021-03", str(tmp_path / "t.parquet"), str(tmp_path / "a.parquet"),
        **for_job(_config(tmp_path, path), run_clean))
    assert pl.read_parquet(tmp_path / "t.parquet").height == 0
    assert pl.read_parquet(tmp_path / "a.parquet").height == 0


def test_unsorted_input_gives_the_same_clean_table(tmp_path):
    rows = [("B" if i % 3 else "A", f"2021-03-0{1 + i % 4} 1{i % 6}:0{i % 10}:00", f"{10 + (i * 7) % 5}", "1")
            for i in range(40)]
    rows += rows[:3]  # duplicates
    sorted_rows = sorted(rows, key=lambda r: (r[0], r[1]))
    outputs = []
    for name, data in (("sorted", sorted_rows), ("shuffled", rows[::-1])):
        path = _csv(tmp_path / f"{name}.csv", data)
        out = tmp_path / f"{name}.parquet"
        run_clean("2021-03", str(out), str(tmp_path / f"{name}-audit.parquet"),
            **for_job(_config(tmp_path, path), run_clean))
        outputs.append(pl.read_parquet(out))
    assert outputs[0].equals(outputs[1])
    assert outputs[0].height == 40  # 43 rows less the three exact duplicates


def test_check_inputs_catches_a_bad_mapping_before_any_job(tmp_path):
    path = _csv(tmp_path / "t.csv")
    cfg = _config(tmp_path, path)
    cfg["columns"]["trades"] = {**MAPPING, "PRICE": "price"}
    with pytest.raises(InputError, match="column 'PRICE'"):
        check_inputs(**for_job(cfg, check_inputs))
    assert load_market("demo")["timezone"] == "America/New_York"
