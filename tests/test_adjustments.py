"""Split- and dividend-adjusted daily returns.

Expected values follow the holding-period return of one share held over the
ex-date (common practice): r = (P_t * split_ratio + dividend) / P_{t-1} - 1,
a 2-for-1 split halving the price leaves a zero return, a cash dividend
equal to the price drop leaves a zero return."""

from datetime import date

import polars as pl
import pytest

from liqpanel.bars import add_returns
from liqpanel.core.errors import InputError
from liqpanel.clean.reading import read_adjustments
from liqpanel.bars.daily_job import run_daily_month
from liqpanel.core.settings import for_job


def _bars(closes, days):
    return pl.DataFrame(
        {"security": ["X"] * len(closes), "date": days, "close": closes}
    ).with_columns(pl.col("date").dt.truncate("1mo").alias("month"))


DAYS = [date(2021, 3, d) for d in (1, 2, 3, 5, 8)]  # no trade on the 4th


def test_split_and_dividend_give_the_holding_period_return():
    bars = _bars([100.0, 99.0, 49.5, 50.0, 51.0], DAYS)
    events = pl.DataFrame(
        {"security": ["X", "X", "X"], "date": [date(2021, 3, 2), date(2021, 3, 3), date(2021, 3, 4)],
         "split_ratio": [1.0, 2.0, 1.0], "dividend": [1.0, 0.0, 0.5]}
    )
    ret = add_returns(bars.lazy(), adjustments=events).collect()["ret"].to_list()
    assert ret[0] is None
    assert ret[1] == pytest.approx((99.0 + 1.0) / 100.0 - 1)  # dividend on its ex-date
    assert ret[2] == pytest.approx(49.5 * 2 / 99.0 - 1)  # 2-for-1 split: no return
    assert ret[3] == pytest.approx((50.0 + 0.5) / 49.5 - 1)  # ex-date the 4th, no trade: counts on the 5th
    assert ret[4] == pytest.approx(51.0 / 50.0 - 1)


def test_events_reach_back_to_the_previous_partition_only_once():
    march = _bars([100.0, 101.0], [date(2021, 3, 30), date(2021, 3, 31)])
    april = _bars([50.0, 51.0], [date(2021, 4, 5), date(2021, 4, 6)])
    events = pl.DataFrame(
        {"security": ["X", "X"], "date": [date(2021, 1, 4), date(2021, 4, 2)], "split_ratio": [3.0, 2.0],
         "dividend": [0.0, 0.0]}
    )
    ret = add_returns(april.lazy(), march.lazy(), events).collect()["ret"].to_list()
    assert ret == pytest.approx([50.0 * 2 / 101.0 - 1, 51.0 / 50.0 - 1])  # the January split is not reapplied


def test_adjustment_file_is_read_with_a_mapping_and_checked(tmp_path):
    path = tmp_path / "events.csv"
    path.write_text("ticker,exdate,ratio\nX,20210303,2\nY,2021-03-04,\n")
    frame = read_adjustments(str(path), {"ticker": "security", "exdate": "date", "ratio": "split_ratio"})
    assert frame.select("security", "date", "split_ratio", "dividend").rows() == [
        ("X", date(2021, 3, 3), 2.0, 0.0), ("Y", date(2021, 3, 4), 1.0, 0.0)
    ]
    path.write_text("security,date,dividend\nX,2021-03-03,one\n")
    with pytest.raises(InputError, match="events.csv: column 'dividend', data row 1 .*'one'"):
        read_adjustments(str(path), {})
    path.write_text("security,date,split_ratio\nX,2021-03-03,0\n")
    with pytest.raises(InputError, match="column 'split_ratio', data row 1.*a positive finite split_ratio"):
        read_adjustments(str(path), {})


def test_daily_stage_applies_the_configured_file(tmp_path):
    bars = _bars([100.0, 49.0], [date(2021, 3, 1), date(2021, 3, 2)])
    bars.write_parquet(tmp_path / "bars.parquet")
    (tmp_path / "events.csv").write_text("security,date,split_ratio\nX,2021-03-02,2\n")
    config = {"inputs": {"adjustments": str(tmp_path / "events.csv")}, "columns": {"adjustments": {}}}
    run_daily_month(str(tmp_path / "bars.parquet"), None, str(tmp_path / "daily.parquet"),
        **for_job(config, run_daily_month))
    assert pl.read_parquet(tmp_path / "daily.parquet")["ret"][1] == pytest.approx(-0.02)
