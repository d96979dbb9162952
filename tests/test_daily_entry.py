"""The daily entry point: a vendor-layout daily file mapped into our contract."""

from pathlib import Path

import polars as pl
import pytest
import yaml

from liqpanel.bars import daily_bars
from liqpanel.core.errors import InputError
from liqpanel.measures import compute_monthly
from liqpanel.bars.daily_job import read_daily_file, run_daily_file
from liqpanel.core.settings import for_job, settings_of
from liqpanel.measures.job import MEASURES_BLOCK_ROWS, measures_block_rows, run_measures_table

REPO = Path(__file__).resolve().parents[1]
MAPPING = yaml.safe_load((REPO / "config" / "daily_example.yaml").read_text())["columns"]["daily"]


def test_daily_file_gives_the_same_measures_as_the_trades():
    # the example file is the demo's daily bars written with 10 decimals, so
    # measures agree with the trade path to that rounding; each market's days
    # are its own local days (demo_data/README.md)
    listing = pl.read_parquet(REPO / "demo_data" / "securities.parquet")
    from_file = read_daily_file(str(REPO / "demo_data" / "daily_example.csv.gz"), MAPPING)
    trades = pl.scan_parquet(REPO / "demo_data" / "trades.parquet").filter(pl.col("true_sign") != 0)
    selection = {"roll_spread": {"convention": "signed"}, "amihud": {}}
    for code, zone, securities in (("HBR", "America/New_York", 40), ("GUL", "Asia/Singapore", 8)):
        mine = pl.col("security").is_in(listing.filter(pl.col("market") == code).get_column("security").implode())
        a = compute_monthly(from_file.filter(mine), selection)
        b = compute_monthly(daily_bars(trades.filter(mine), timezone=zone), selection)
        assert a.height == b.height == securities * 24
        for column in ("roll_spread", "amihud", "n_days"):
            assert a[column].to_numpy() == pytest.approx(b[column].to_numpy(), rel=1e-6, abs=1e-8, nan_ok=True), column


def test_return_is_computed_when_the_file_has_none(tmp_path):
    frame = pl.DataFrame(
        {"sym": ["A", "A", "A"], "d": ["2021-01-04", "2021-01-05", "2021-02-01"], "o": [1.0, 1.0, 1.0],
         "h": [1.0, 1.0, 1.0], "l": [1.0, 1.0, 1.0], "c": [10.0, 11.0, 12.1], "v": [5.0, 5.0, 5.0]}
    )
    path = tmp_path / "d.csv"
    frame.write_csv(path)
    mapping = {"sym": "security", "d": "date", "o": "open", "h": "high", "l": "low", "c": "close", "v": "volume"}
    out = read_daily_file(str(path), mapping).collect()
    assert out["ret"].to_list()[1:] == pytest.approx([0.1, 0.1])
    assert out["dollar_volume"].to_list() == pytest.approx([50.0, 55.0, 60.5])


def test_missing_and_bad_columns_are_named(tmp_path):
    path = tmp_path / "d.csv"
    pl.DataFrame({"security": ["A"], "date": ["2021-01-04"], "open": [1.0], "high": [1.0], "low": [1.0],
                  "close": ["x"], "volume": [1.0]}).write_csv(path)
    with pytest.raises(InputError, match="column 'close'"):
        read_daily_file(str(path), {})
    pl.DataFrame({"security": ["A"], "date": ["04/01/2021"], "open": [1.0], "high": [1.0], "low": [1.0],
                  "close": [1.0], "volume": [1.0]}).write_csv(path)
    with pytest.raises(InputError, match="column 'date'"):
        read_daily_file(str(path), {})
    with pytest.raises(InputError, match="'nope'"):
        read_daily_file(str(path), {"nope": "security"})


@pytest.mark.slow
def test_daily_example_run_puts_the_daily_audit_in_the_run_folder(tmp_path):
    import gzip

    from liqpanel import cli

    config = yaml.safe_load((REPO / "config" / "daily_example.yaml").read_text())
    config["run"].update(results_dir=str(tmp_path / "results"), work_dir=str(tmp_path / "work"))
    for key in ("daily", "returns"):
        config["inputs"][key] = str(REPO / config["inputs"][key])
    config["inputs"]["characteristics"][0]["path"] = str(REPO / config["inputs"]["characteristics"][0]["path"])
    path = tmp_path / "daily.yaml"
    path.write_text(yaml.safe_dump(config))
    assert cli.main(["run", "--config", str(path), "--cores", "2", "--quiet", "rules"]) == 0
    audit = pl.read_csv(tmp_path / "results" / "latest" / "tables" / "daily_audit.csv")
    counts = dict(zip(audit["rows"], audit["count"]))
    # every data line of the file (lines minus the header) is read and kept; nothing dropped
    lines = sum(1 for _ in gzip.open(REPO / config["inputs"]["daily"], "rt")) - 1
    assert counts["read"] == counts["kept"] == lines
    assert sum(v for k, v in counts.items() if k.startswith("dropped")) == 0
    assert not (tmp_path / "results" / "latest" / "tables" / "daily_suspected_splits.csv").exists()


def _daily_example_config(tmp_path: Path, measures: dict) -> dict:
    from liqpanel.config import validate_config

    config = yaml.safe_load((REPO / "config" / "daily_example.yaml").read_text())
    config["run"].update(results_dir=str(tmp_path / "results"), work_dir=str(tmp_path / "work"))
    for key in ("daily", "returns", "fx"):
        config["inputs"][key] = str(REPO / config["inputs"][key])
    config["inputs"]["characteristics"][0]["path"] = str(REPO / config["inputs"]["characteristics"][0]["path"])
    config["measures"] = measures
    return validate_config(config, source="test")


def test_months_measured_in_blocks_have_the_values_of_months_measured_alone(tmp_path):
    # a daily file's measures job measures consecutive months in one call; for the measures it does
    # that for, the table must be the one measured month by month, to the last bit
    from liqpanel.core.io import month_range

    blockwise = {name: {} for name in (
        "amihud", "amivest", "ar_spread_2day", "ar_spread_monthly", "cs_spread", "edge_spread", "effective_tick",
        "limit_days", "ps_gamma", "turnover", "vol_close", "vol_garman_klass", "vol_parkinson",
        "vol_rogers_satchell", "vol_yang_zhang")} | {"roll_spread": {"convention": "missing"}}
    config = _daily_example_config(tmp_path, blockwise)
    assert measures_block_rows(settings_of(config).measures) == MEASURES_BLOCK_ROWS
    months = month_range(config["sample"]["start"], config["sample"]["end"])
    daily = [str(tmp_path / "work" / f"daily-{m}.parquet") for m in months]
    run_daily_file(months, daily, str(tmp_path / "audit.parquet"), str(tmp_path / "splits.parquet"),
        **for_job(config, run_daily_file))
    for label, rows in (("alone", 0), ("blocks", 5_000), ("whole", 10**9)):
        run_measures_table(daily, None, str(tmp_path / f"{label}.parquet"), block_rows=rows,
            **for_job(config, run_measures_table))
    alone = pl.read_parquet(tmp_path / "alone.parquet").sort("security", "month")
    assert alone.height == 48 * 24  # 48 securities, 24 months (demo_data/README.md)
    for label in ("blocks", "whole"):
        assert pl.read_parquet(tmp_path / f"{label}.parquet").sort("security", "month").equals(alone), label


def test_measures_that_depend_on_the_months_measured_with_them_go_month_by_month(tmp_path):
    # the Gibbs sampler draws from one random stream for every month it estimates; the share of zero
    # returns counts the market's days within each security's listed span (liqpanel.measures.plan)

    for measure in ("gibbs_spread", "zero_return_share", "liu_lm"):
        config = _daily_example_config(tmp_path, {"amihud": {}, measure: {}})
        assert measures_block_rows(settings_of(config).measures) == 0, measure
