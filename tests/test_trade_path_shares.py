"""Shares outstanding on the trade path: turnover and Liu's LM1 from trades plus a characteristics file.

A daily file brings its own ``shares_out`` column; from trades, the daily
stage takes each month's shares outstanding from the ``inputs.characteristics``
entry that lists ``shares_out`` among its variables (``liqpanel.bars.daily_job``).
"""

from __future__ import annotations

import numpy as np
import polars as pl
import pytest
import yaml

from liqpanel.cli import main
from liqpanel.config import validate_config
from liqpanel.measures import compute_monthly
from liqpanel.simulate import simulate_market, write_market
from liqpanel.bars.daily_job import run_daily_month
from liqpanel.bars.job import run_bars_month
from liqpanel.clean.job import run_clean
from liqpanel.core.settings import for_job

MONTHS = ("2021-01", "2021-02")


def trade_config(folder, *, shares: bool) -> dict:
    entry = {"name": "market_data", "path": str(folder / "characteristics.parquet"), "date_column": "date",
             "variables": ["market_cap", "shares_out"] if shares else ["market_cap"]}
    return validate_config({
        "sample": {"start": MONTHS[0], "end": MONTHS[-1]}, "market": "demo",
        "inputs": {"trades": str(folder / "trades.parquet"), "quotes": str(folder / "quotes.parquet"),
                   "characteristics": [entry]},
        "measures": {"turnover": {}, "liu_lm": {}},
        "run": {"results_dir": str(folder / "results"), "work_dir": str(folder / "work")},
    })


def daily_from_trades(folder, config) -> pl.DataFrame:
    previous, frames = None, []
    for month in MONTHS:
        paths = {n: str(folder / "work" / f"{n}-{month}.parquet") for n in ("clean", "audit", "quotes", "bars", "daily")}
        run_clean(month, paths["clean"], paths["audit"], paths["quotes"], **for_job(config, run_clean))
        run_bars_month(paths["clean"], paths["bars"], paths["quotes"], **for_job(config, run_bars_month))
        run_daily_month(paths["bars"], previous, paths["daily"], **for_job(config, run_daily_month))
        previous = paths["bars"]
        frames.append(pl.read_parquet(paths["daily"]))
    return pl.concat(frames)


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    folder = tmp_path_factory.mktemp("market")
    market = simulate_market(n_securities=4, n_months=2, seed=9, intensity_center=60.0, intensity_range=(40.0, 80.0))
    write_market(market, folder)
    (folder / "work").mkdir()
    return folder, market


def test_turnover_and_liu_lm_have_values_on_the_trade_path(folder):
    folder, market = folder
    daily = daily_from_trades(folder, trade_config(folder, shares=True))
    assert daily["shares_out"].null_count() == 0
    monthly = compute_monthly(daily.lazy(), {"turnover": {}, "liu_lm": {}}).sort("security", "month")
    # turnover = the month's volume / shares outstanding (common practice): the volume of the clean
    # trades over the simulator's own shares outstanding (constant, liqpanel.simulate)
    volume = daily.group_by("security", "month").agg(pl.col("volume").sum())
    expected = volume.join(market.securities.select("security", "shares_out"), on="security").with_columns(
        (pl.col("volume") / pl.col("shares_out")).alias("expected")).sort("security", "month")
    raw = market.trades["size"].sum()  # the cleaning rules drop a few of the simulated trades at most
    assert 0.99 * raw <= expected["volume"].sum() <= raw
    assert monthly["turnover"].to_numpy() == pytest.approx(expected["expected"].to_numpy(), rel=1e-12)
    # Liu (2006) LM1 = [zero-volume days + (1 / TO) / 11,000] x 21 / trading days (from memory); every day trades
    days = daily.group_by("security", "month").len().sort("security", "month")["len"].to_numpy()
    lm1 = (1.0 / expected["expected"].to_numpy() / 11_000.0) * 21 / days
    assert monthly["liu_lm1"].to_numpy() == pytest.approx(lm1, rel=1e-12)
    for reason in ("liu_lm_reason", "turnover_reason"):
        assert monthly[reason].null_count() == monthly.height


def test_without_a_shares_entry_the_measures_say_why(folder):
    folder, _ = folder
    daily = daily_from_trades(folder, trade_config(folder, shares=False))
    assert "shares_out" not in daily.columns
    with pytest.raises(Exception, match="shares_out"):
        compute_monthly(daily.lazy(), {"turnover": {}})


def test_preflight_accepts_the_trade_path_only_with_a_shares_entry(folder, tmp_path, capsys):
    folder, _ = folder
    for shares, status in ((False, 2), (True, 0)):
        config = trade_config(folder, shares=shares)
        path = tmp_path / "my.yaml"
        path.write_text(yaml.safe_dump(config, sort_keys=False))
        assert main(["check-config", str(path)]) == status
        err = capsys.readouterr().err
        if not shares:
            assert "measure 'turnover' needs daily column(s) ['shares_out']" in err
            assert "list shares_out among the variables of an inputs.characteristics entry" in err
