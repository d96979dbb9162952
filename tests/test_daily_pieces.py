"""A daily file read in pieces (``bars.daily_file.read_daily_pieces``) gives the daily table, audit and
suspected splits of the file read whole (``read_daily``), whatever the size of the pieces."""

from datetime import date

import numpy as np
import polars as pl
import pytest

from liqpanel import ingest
from liqpanel.bars import daily_file as dailyfile
from liqpanel.core.errors import InputError

MAPPING = {"Ticker": "security", "Day": "date", "O": "open", "H": "high", "L": "low", "C": "close", "Vol": "volume"}
SAMPLE = ("2021-01", "2021-06")


def _file(tmp_path, shuffle: bool = False, unparseable: bool = False):
    """Invented securities over weekdays from 2020-12 to 2021-07 (days before and after the sample), with
    a row planted for each drop rule and a 2:1 split of the closes and volumes of one security."""
    days = pl.date_range(date(2020, 12, 1), date(2021, 7, 30), "1d", eager=True)
    days = days.filter(days.dt.weekday() <= 5)
    names = [f"ZQ{i:02d}" for i in range(12)]
    rng = np.random.default_rng(7)
    close = 20 * np.exp(np.cumsum(rng.normal(0, 0.01, (len(names), days.len())), axis=1))
    volume = rng.integers(100, 1000, close.shape).astype(float)
    split = days.len() // 2
    close[3, split:] /= 2  # ZQ03 splits 2:1 and nobody adjusted the prices
    volume[3, split:] *= 2
    frame = pl.DataFrame({
        "Ticker": np.repeat(names, days.len()),
        "Day": np.tile(days.dt.strftime("%Y%m%d").to_numpy(), len(names)),
        "O": close.ravel(), "H": close.ravel() * 1.01, "L": close.ravel() * 0.99, "C": close.ravel(),
        "Vol": volume.ravel(),
    }).with_columns(pl.col("O", "H", "L", "C", "Vol").cast(pl.String))
    planted = {  # row -> (column, value): each breaks one rule
        40: ("C", "inf"),        # non_finite
        41: ("C", ""),           # no_trade
        42: ("O", "-1"),         # nonpositive_price
        43: ("Vol", "-5"),       # negative_volume
        44: ("H", "1"),          # bad_range: high below low (repaired: the range is cleared)
        46: ("Ticker", ""),      # missing_key
        400: ("Day", ""),        # missing_key
        1200: ("Ticker", ""),    # missing_key
    }
    if unparseable:
        planted[45] = ("Vol", "many")
    for row, (column, value) in planted.items():
        frame[row, column] = value
    if shuffle:
        frame = frame.sample(fraction=1.0, shuffle=True, seed=3)
    path = tmp_path / "daily.csv"
    frame.write_csv(path)
    return ingest.layout_from("daily", str(path), MAPPING, None), frame.height, days[split]


def _open_days():
    days = pl.date_range(date(2020, 12, 1), date(2021, 7, 30), "1d", eager=True)
    days = days.filter((days.dt.weekday() <= 5) & (days != date(2021, 3, 15)))  # an invented holiday
    return dailyfile.OpenDays(date(2020, 12, 1), date(2021, 7, 30), days.to_frame("date"))


def _pieces(layout, settings, adjustments, rows):
    pieces = []
    read = dailyfile.read_daily_pieces(layout, settings, SAMPLE, adjustments, _open_days(), pieces.append, rows)
    return pl.concat(pieces), read, len(pieces)


@pytest.mark.parametrize("rows", [1, 97, 500, 100_000])
@pytest.mark.parametrize("adjusted", [False, True])
def test_pieces_give_the_table_audit_and_splits_of_the_whole_file(tmp_path, rows, adjusted):
    layout, n, split_day = _file(tmp_path)
    adjustments = pl.DataFrame({"security": ["ZQ05"], "date": [date(2021, 4, 1)], "split_ratio": [3.0],
                                "dividend": [0.1]}) if adjusted else None
    settings = {"unparseable": "drop"}
    whole = dailyfile.read_daily(layout, settings, SAMPLE, adjustments, _open_days())
    daily, read, count = _pieces(layout, settings, adjustments, rows)
    assert count > 1 or rows == 100_000  # read in several pieces, except when a piece holds the file
    assert daily.equals(whole.daily) and daily.schema == whole.daily.schema
    assert read.audit.equals(whole.audit)
    assert read.splits.equals(whole.splits)
    assert read.daily.height == 0
    # every rule planted is counted once, and every row read is accounted for
    totals = read.audit.select(pl.exclude("security", "month").sum()).row(0, named=True)
    for rule in ("non_finite", "no_trade", "nonpositive_price", "negative_volume"):
        assert totals[f"drop_{rule}"] == 1, rule
    assert totals["drop_missing_key"] == 3 and totals["repaired_range"] == 1
    assert totals["drop_closed_day"] == 12  # 2021-03-15 of every security
    assert totals["rows_read"] == n
    assert totals["rows_read"] == totals["rows_kept"] + sum(totals[f"drop_{r}"] for r in dailyfile.RULES)
    # the unadjusted 2:1 split is suspected (its day's return is about -1/2, its volume doubled); a 3:1
    # split given where the prices did not split makes its day look like a 1:3 reverse split
    expected = [("ZQ03", split_day, "2:1")] + ([("ZQ05", date(2021, 4, 1), "1:3")] if adjusted else [])
    assert read.splits.select("security", "date", "suspected_split").rows() == expected


def test_a_file_out_of_key_order_is_left_to_the_whole_read(tmp_path):
    layout, _, _ = _file(tmp_path, shuffle=True)
    with pytest.raises(dailyfile.NotInPieces, match="key order"):
        _pieces(layout, {"unparseable": "drop"}, None, 500)


@pytest.mark.parametrize("policy", ["error", "drop"])
def test_a_value_that_does_not_parse_is_left_to_the_whole_read(tmp_path, policy):
    # the whole read names the file, column, row and value, or drops the row under its rule
    layout, _, _ = _file(tmp_path, unparseable=True)
    with pytest.raises(dailyfile.NotInPieces):
        _pieces(layout, {"unparseable": policy}, None, 500)
    if policy == "error":
        with pytest.raises(InputError, match="many"):
            dailyfile.read_daily(layout, {}, SAMPLE, None, _open_days())
    else:
        audit = dailyfile.read_daily(layout, {"unparseable": "drop"}, SAMPLE, None, _open_days()).audit
        assert audit["drop_unparseable"].sum() == 1
