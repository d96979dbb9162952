"""Month partitions: a market run as many partitions gives the tables of one.

- The month window pushed into the trade scan keeps every row of its month
  (same clean trades and audit as a scan without it), for time-zone aware,
  foreign-zone and naive timestamps, and every row of the file is read by
  exactly one partition.
- Chaining the stages month by month (clean -> bars -> daily -> measures,
  each month reading the previous partition where it must) gives the daily
  table and the monthly measures of the whole market computed at once.
- A measure that asks for the previous trading day gets it across the month
  boundary, checked against pandas on the whole daily table; the other
  measures and ``n_days`` never see the borrowed day.
"""

from datetime import date, datetime, time
from pathlib import Path

import numpy as np
import pandas as pd
import polars as pl
import pytest
from polars.testing import assert_frame_equal

from liqpanel.clean import reading as readers
from liqpanel.bars import add_returns, intraday_bars, needed_columns
from liqpanel.config import load_market, validate_config
from liqpanel.core.io import month_range
from liqpanel.measures import REGISTRY, Measure, compute_monthly, register
from liqpanel.measures.neighbours import in_security_date_order, previous_in_month
from liqpanel.measures.roll import roll_spread
from liqpanel.core.partition import PREVIOUS_DAY, month_window, spans, stored_window, with_previous_day
from liqpanel.simulate import simulate_market, write_market
from liqpanel.bars.daily_job import run_daily_month
from liqpanel.bars import job as bars_job
from liqpanel.bars.job import run_bars, run_bars_month
from liqpanel.clean import job as clean_job
from liqpanel.clean.job import run_clean
from liqpanel.core.io import gather_parquet
from liqpanel.core.settings import for_job
from liqpanel.measures.job import run_measures_month

KEY = ["security", "month"]
GAP = "overnight_gap_check"


def _config(data: Path, start: str, end: str, measures: dict) -> dict:
    return validate_config(
        {
            "sample": {"start": start, "end": end},
            "market": "demo",
            "inputs": {"trades": str(data / "trades.parquet")},
            "measures": measures,
        }
    )


def overnight_gap(daily: pl.LazyFrame, **_) -> pl.LazyFrame:
    """Mean overnight log return log(open_t / close_{t-1}) of a security-month.

    t-1 is the security's previous trading day, for the month's first day the
    previous month's last (common practice for an overnight return). A check
    measure for these tests only: it needs the day before each day.
    """
    gap = (pl.col("open") / previous_in_month(pl.col("close"))).log()
    return (
        in_security_date_order(daily)
        .with_columns(gap.alias("gap"))
        .filter(~pl.col(PREVIOUS_DAY))
        .group_by(KEY)
        .agg(pl.col("gap").mean().alias(GAP), pl.col("gap").count().alias("n_obs"))
    )


@pytest.fixture
def gap_measure():
    register(
        Measure(
            name=GAP, function=overnight_gap, outputs=(GAP,), columns=("open", "close", PREVIOUS_DAY),
            source="common practice", family="check", min_days=1,
        )
    )
    yield GAP
    del REGISTRY[GAP]


# ---------------------------------------------------------------- the trade scan


def _stored_as(trades: pl.DataFrame, kind: str) -> pl.DataFrame:
    """The same instants stored as a vendor might: UTC, another zone, or naive local clock."""
    ts = pl.col("ts")
    if kind == "utc_ms":
        return trades.with_columns(ts.dt.cast_time_unit("ms"))
    if kind == "paris":
        return trades.with_columns(ts.dt.convert_time_zone("Europe/Paris"))
    local = ts.dt.convert_time_zone("America/New_York").dt.replace_time_zone(None)
    if kind == "naive_local":
        return trades.with_columns(local)
    if kind == "date_and_time":  # the local trading date and clock in two columns
        return trades.with_columns(local.dt.date().alias("date"), local.dt.time().alias("time")).drop("ts")
    raise ValueError(kind)


@pytest.mark.parametrize("kind", ["utc_ms", "paris", "naive_local", "date_and_time"])
def test_month_window_keeps_every_row_of_its_partition(tmp_path, monkeypatch, kind):
    market = simulate_market(n_securities=6, n_months=4, seed=7, bad_row_share=0.03)
    trades = market.trades.drop("true_sign")
    odd = pl.DataFrame(
        {
            "security": ["ODD1", "ODD2"],
            # a missing time (first partition), and 02:30 on 14 March 2021, a
            # local time New York skips (daylight saving) when read as naive
            "ts": [None, datetime(2021, 3, 14, 7, 30)],
            "price": [10.0, 10.0],
            "size": [100.0, 100.0],
        },
        schema=trades.schema,
    )
    stored = _stored_as(pl.concat([trades, odd]).sort("ts"), kind)
    odd2 = pl.col("security") == "ODD2"
    if kind == "naive_local":  # the skipped local time itself, as a vendor would write it
        stored = stored.with_columns(pl.when(odd2).then(datetime(2021, 3, 14, 2, 30)).otherwise(pl.col("ts")).alias("ts"))
    if kind == "date_and_time":
        stored = stored.with_columns(pl.when(odd2).then(time(2, 30)).otherwise(pl.col("time")).alias("time"))
    path = tmp_path / "trades.parquet"
    stored.write_parquet(path, row_group_size=500, statistics=True)  # small row groups: the window prunes

    # the sample leaves January and April outside: their rows go to the first and last partitions
    config = _config(tmp_path, "2021-02", "2021-03", {"roll_spread": None})
    config["clean"]["unparseable"] = "drop"  # the skipped local time is counted, not an error
    total = 0
    for month in ("2021-02", "2021-03"):
        windowed = _clean(config, month, tmp_path / "windowed" / month)
        with monkeypatch.context() as patch:  # the same job reading the whole file
            patch.setattr(clean_job, "stored_window", lambda *args, **kwargs: None)
            whole = _clean(config, month, tmp_path / "whole" / month)
        for name in ("trades", "audit", "quotes"):
            assert_frame_equal(windowed[name], whole[name])
        total += windowed["audit"].filter(pl.col("table") == "trades")["rows_read"].sum()
    assert total == stored.height  # each row read by exactly one partition

    # the window reaches the reader: fewer rows leave the file, still numbered as in the file
    window = lambda schema: stored_window(schema, "2021-03", ("2021-02", "2021-03"), "America/New_York")  # noqa: E731
    read = readers.read_table(str(path), {}, readers.TRADES_SPEC, "America/New_York", window).frame.collect()
    assert 0 < read.height < stored.height  # January and February stay in the file
    numbered = stored.with_row_index("_row").select(pl.col("_row").cast(pl.Int64), "price")
    assert_frame_equal(read.select("_row", "price"), numbered.join(read.select("_row"), on="_row", how="semi"))


def _clean(config: dict, month: str, out: Path) -> dict[str, pl.DataFrame]:
    paths = {name: out / f"{name}.parquet" for name in ("trades", "audit", "quotes")}
    run_clean(month, str(paths["trades"]), str(paths["audit"]), str(paths["quotes"]), **for_job(config, run_clean))
    return {name: pl.read_parquet(path) for name, path in paths.items()}


def test_month_window_bounds_are_local_month_ends():
    # New York is UTC-5 in February and UTC-4 from mid-March (common practice: EST/EDT)
    window = month_window(pl.Datetime("us", "UTC"), "2021-03", ("2021-01", "2021-06"), "America/New_York")
    stamps = [datetime(2021, 3, 1, 4, 59), datetime(2021, 3, 1, 5, 0), datetime(2021, 4, 1, 3, 59), datetime(2021, 4, 1, 4, 0)]
    frame = pl.DataFrame({"ts": stamps}, schema={"ts": pl.Datetime("us", "UTC")})
    assert frame.select(window)["ts"].to_list() == [False, True, True, False]
    first = month_window(pl.Datetime("us", "UTC"), "2021-01", ("2021-01", "2021-06"), "America/New_York")
    assert pl.DataFrame({"ts": [None]}, schema={"ts": pl.Datetime("us", "UTC")}).select(first).item() is True
    assert month_window(pl.String, "2021-03", ("2021-01", "2021-06"), "America/New_York") is None


def test_window_on_a_date_column_keeps_two_days_either_side():
    sample = ("2021-01", "2021-06")
    days = [date(2021, 2, 26), date(2021, 2, 27), date(2021, 4, 2), date(2021, 4, 3)]
    as_dates = pl.DataFrame({"date": days, "time": ["10:00"] * 4})
    as_numbers = as_dates.with_columns(pl.col("date").dt.strftime("%Y%m%d").cast(pl.Int64))
    for frame in (as_dates, as_numbers):
        window = stored_window(frame.schema, "2021-03", sample, "America/New_York")
        assert frame.select(window)["date"].to_list() == [False, True, True, False]
    # the first partition also takes the rows whose date or time does not parse: no narrowing
    assert stored_window(as_dates.schema, "2021-01", sample, "America/New_York") is None


# ---------------------------------------------------------------- one partition or many


@pytest.fixture(scope="module")
def small_market(tmp_path_factory):
    data = tmp_path_factory.mktemp("market")
    spec = dict(n_securities=10, n_months=4, seed=3, bad_row_share=0.01, overnight_share=0.3,
                intensity_center=2.0, intensity_range=(0.5, 20.0))  # thin securities skip days
    write_market(simulate_market(**spec), data)
    return data


def _run_partitioned(config: dict, work: Path) -> tuple[pl.DataFrame, pl.DataFrame]:
    """Each month through the stage functions the workflow's rules call, reading the previous partition."""
    months = month_range(config["sample"]["start"], config["sample"]["end"])
    names = ("clean", "quotes", "audit", "bars", "daily", "measures")
    part = {m: {s: str(work / s / f"month={m}" / f"{s}.parquet") for s in names} for m in months}
    for i, m in enumerate(months):
        p, before = part[m], (part[months[i - 1]] if i else None)
        run_clean(m, p["clean"], p["audit"], p["quotes"], **for_job(config, run_clean))
        run_bars_month(p["clean"], p["bars"], p["quotes"], **for_job(config, run_bars_month))
        run_daily_month(p["bars"], before["bars"] if before else None, p["daily"], **for_job(config, run_daily_month))
        run_measures_month(p["daily"], before["daily"] if before else None, p["measures"],
            **for_job(config, run_measures_month))
    gather_parquet([part[m]["measures"] for m in months], str(work / "monthly.parquet"), KEY)
    daily = pl.concat([pl.read_parquet(part[m]["daily"]) for m in months]).sort("security", "date")
    return daily, pl.read_parquet(work / "monthly.parquet")


def test_many_partitions_give_the_tables_of_one(tmp_path, small_market, gap_measure):
    measures = {"roll_spread": {"convention": "zero", "min_days": 5}, "amihud": {"min_days": 5}, gap_measure: None}
    config = _config(small_market, "2021-01", "2021-04", measures)
    daily, monthly = _run_partitioned(config, tmp_path)

    # the whole market at once: every clean trade in one frame, one daily table, one measures call
    clean = pl.concat([pl.read_parquet(p) for p in sorted(tmp_path.glob("clean/month=*/clean.parquet"))])
    columns = needed_columns(config["measures"])  # the high-frequency columns these measures read: none
    whole_bars = intraday_bars(clean.lazy(), None, load_market("demo"), config["bars"], columns)
    whole_daily = add_returns(whole_bars).collect()
    assert_frame_equal(daily, whole_daily)
    assert_frame_equal(monthly, compute_monthly(whole_daily.lazy(), config["measures"]))
    assert monthly.height == whole_daily.select(KEY).unique().height  # no month made of a borrowed day

    # the borrowed day: pandas on the whole daily table (groupby-shift over trading days)
    frame = whole_daily.to_pandas()
    frame["gap"] = np.log(frame["open"] / frame.groupby("security")["close"].shift(1))
    expected = frame.groupby(["security", "month"])["gap"].agg(["mean", "count"]).reset_index()
    got = monthly.select(*KEY, GAP, f"{GAP}_n").to_pandas()
    both = expected.merge(got, on=KEY)
    assert len(both) == monthly.height
    np.testing.assert_allclose(both[GAP], both["mean"], rtol=1e-12)
    assert (both[f"{GAP}_n"] == both["count"]).all()
    later = both[both["month"] > pd.Timestamp("2021-01-01")]
    assert (later[f"{GAP}_n"] == monthly.filter(pl.col("month") > date(2021, 1, 1))["n_days"].to_numpy()).all()

    # measures that do not ask for it never see it: Roll from each month's own days alone
    for m in ("2021-02", "2021-03"):
        own = whole_daily.filter(pl.col("month") == date.fromisoformat(f"{m}-01"))
        alone = roll_spread(own.lazy(), convention="zero").collect().sort(KEY)
        got = monthly.filter(pl.col("month") == date.fromisoformat(f"{m}-01")).sort(KEY)
        np.testing.assert_allclose(got["roll_spread_n"], alone["n_obs"])
        np.testing.assert_allclose(got["n_days"], own.group_by("security").len().sort("security")["len"])


# ---------------------------------------------------------------- the previous day


def _bars(rows):
    return pl.DataFrame(
        rows, schema={"security": pl.String, "date": pl.Date, "close": pl.Float64}, orient="row"
    ).with_columns(pl.col("date").dt.truncate("1mo").alias("month"), pl.col("close").alias("open"))


def test_previous_day_is_borrowed_only_from_the_month_before():
    daily = _bars([
        ("AAA", date(2021, 1, 28), 10.0), ("AAA", date(2021, 1, 29), 11.0), ("AAA", date(2021, 2, 1), 12.0),
        ("BBB", date(2021, 1, 29), 20.0), ("BBB", date(2021, 3, 1), 21.0),  # no February
    ]).lazy()
    out = with_previous_day(daily).collect()
    borrowed = out.filter(pl.col(PREVIOUS_DAY))
    assert borrowed.select("security", "date", "month", "close").rows() == [
        ("AAA", date(2021, 1, 29), date(2021, 2, 1), 11.0)
    ]
    assert out.filter(~pl.col(PREVIOUS_DAY)).height == 5
    # the lent day sits just before the month it leads into, after its own month's row of the same date
    assert out.filter(pl.col("security") == "AAA").select("date", "month", PREVIOUS_DAY).rows() == [
        (date(2021, 1, 28), date(2021, 1, 1), False), (date(2021, 1, 29), date(2021, 1, 1), False),
        (date(2021, 1, 29), date(2021, 2, 1), True), (date(2021, 2, 1), date(2021, 2, 1), False),
    ]
    # from a previous partition, the same row
    previous, current = (daily.filter(pl.col("month") == date(2021, m, 1)) for m in (1, 2))
    part = with_previous_day(current, previous).collect()
    assert_frame_equal(part, out.filter(pl.col("month") == date(2021, 2, 1)))


def test_return_after_a_month_without_trading_is_missing_in_both_layouts():
    bars = _bars([
        ("AAA", date(2021, 1, 29), 10.0), ("AAA", date(2021, 2, 1), 11.0),
        ("BBB", date(2021, 1, 29), 20.0), ("BBB", date(2021, 3, 1), 25.0),  # a whole February without a trade
    ])
    whole = add_returns(bars.lazy()).collect()
    assert whole.filter(pl.col("date") == date(2021, 2, 1))["ret"].item() == pytest.approx(0.1)
    assert whole.filter(pl.col("date") == date(2021, 3, 1))["ret"].item() is None
    march = add_returns(
        bars.filter(pl.col("month") == date(2021, 3, 1)).lazy(), bars.filter(pl.col("month") == date(2021, 2, 1)).lazy()
    ).collect()
    assert_frame_equal(march, whole.filter(pl.col("month") == date(2021, 3, 1)))


def test_spans_are_calendar_blocks_that_cover_every_month_once():
    # a sample from March 2021 to February 2023 in calendar years (the default), then in quarters
    months = month_range("2021-03", "2023-02")
    years = spans(months, 12)
    assert [s[0] for s in years] == ["2021-03", "2022-01", "2023-01"]
    assert [len(s) for s in years] == [10, 12, 2]
    assert [m for s in years for m in s] == months
    assert [s[0] for s in spans(months, 3)][:3] == ["2021-03", "2021-04", "2021-07"]
    assert len(spans(month_range("2001-01", "2020-12"), 12)) == 20  # 20 years: 20 jobs per span stage
    assert spans(months, 1) == [[m] for m in months]


# ---------------------------------------------------------------- a span in one pass


@pytest.mark.parametrize("with_quotes", [True, False])
def test_a_span_cleaned_in_one_pass_writes_the_partitions_of_month_by_month(tmp_path, monkeypatch, with_quotes):
    # the demo's two markets (each on its own clock), with and without its quotes and every rule, over four
    # months so that the first and last partitions take the rows before and after the sample: the files
    # written by one pass over the span are, byte for byte, those written one month at a time
    from liqpanel.config import load_config

    demo = Path(__file__).resolve().parents[1] / "config" / "config.yaml"
    config = load_config(demo)
    config["sample"] = {"start": "2021-10", "end": "2022-01"}
    if not with_quotes:
        config["inputs"]["quotes"] = None
    months = month_range("2021-10", "2022-01")
    written = {}
    for name, rows in (("by_month", 0), ("one_pass", 10**9)):
        monkeypatch.setattr(bars_job, "ROWS_PER_PASS", rows)
        paths = {k: [str(tmp_path / name / f"{k}-{m}.parquet") for m in months] for k in ("trades", "audit", "quotes", "bars")}
        (tmp_path / name).mkdir()
        run_bars(months, paths, **for_job(config, run_bars))
        written[name] = {Path(p).name: Path(p).read_bytes() for ps in paths.values() for p in ps}
    assert len(written["one_pass"]) == 16
    assert written["one_pass"] == written["by_month"]
    # every row of the files lands in exactly one partition: a row of the second market near a month end
    # belongs to the month of its own clock, which the read window must reach
    audit = pl.concat([pl.read_parquet(tmp_path / "one_pass" / f"audit-{m}.parquet") for m in months])
    assert audit.get_column("partition").unique().sort().to_list() == months
    for table in ("trades", "quotes") if with_quotes else ("trades",):
        read = audit.filter(pl.col("table") == table).get_column("rows_read").sum()
        assert read == pl.scan_parquet(config["inputs"][table]).select(pl.len()).collect().item()
    bars = pl.read_parquet(tmp_path / "one_pass" / "bars-2021-12.parquet")
    assert bars.height > 0 and bars.get_column("month").unique().to_list() == [date(2021, 12, 1)]
