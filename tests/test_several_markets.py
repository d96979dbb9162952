"""Several markets in one run (liqpanel.markets.several): per-market profiles, FX, unknown codes."""

from __future__ import annotations

import copy
import re
from datetime import date as dt

import numpy as np
import polars as pl
from polars.testing import assert_frame_equal
import pytest
import yaml

from liqpanel.config import load_config, validate_config
from liqpanel.core.errors import ConfigError, InputError
from tests.demo_config import one_market
from liqpanel.bars.daily_job import run_daily_file, run_daily_month
from liqpanel.bars.job import run_bars_month
from liqpanel.clean.job import check_inputs, run_clean
from liqpanel.core.settings import for_job
from liqpanel.measures.job import run_measures_month

DEMO = "config/config.yaml"
MONTHS = ["2021-03", "2021-04"]
RATE = 4.0  # units of the reporting currency ZZH per unit of ZZQ (invented)


def _profile(tmp_path):
    """A second invented market: the demo's zone and clock, another currency and a half day."""
    path = tmp_path / "quay.yaml"
    path.write_text(yaml.safe_dump({
        "name": "Quay Row Exchange (invented)", "timezone": "America/New_York",
        "sessions": [["09:10", "15:40"]], "half_days": {"2021-03-16": "12:00"}, "currency": "ZZQ",
    }))
    return str(path)


def _split(tmp_path):
    """The demo's securities: every other one listed in the second market."""
    listing = pl.read_parquet("demo_data/securities.parquet")
    # the demo's first market (HBR), split here over two markets; its second market (GUL) is left out
    names = listing.filter(pl.col("market") == "HBR").get_column("security").sort()
    codes = pl.DataFrame({"security": names, "exch": ["HBR" if i % 2 == 0 else "QRW" for i in range(len(names))]})
    codes.write_csv(tmp_path / "securities.csv")
    return codes


def _base(tmp_path) -> dict:
    """The demo config on its first market's securities alone (one market, ``tests.demo_config.one_market``)."""
    config = one_market(copy.deepcopy(load_config(DEMO)))
    first = pl.read_parquet("demo_data/securities.parquet").filter(pl.col("market") == "HBR").get_column("security")
    (tmp_path / "hbr").mkdir(exist_ok=True)
    for key in ("trades", "quotes"):
        out = tmp_path / "hbr" / f"{key}.parquet"
        pl.read_parquet(config["inputs"][key]).filter(pl.col("security").is_in(first.implode())).write_parquet(out)
        config["inputs"][key] = str(out)
    config["sample"] = {"start": MONTHS[0], "end": MONTHS[-1]}
    config["run"]["work_dir"] = str(tmp_path / "work")
    config["measures"] = {k: v for k, v in config["measures"].items() if k not in ("gibbs_spread", "lot_mixed", "lot_ysplit")}
    return config


def _measure(config: dict, tag: str, tmp_path, trades_filter=None) -> pl.DataFrame:
    """Clean, bars, daily and measures of MONTHS at function level; the monthly table."""
    folder = tmp_path / tag
    folder.mkdir()
    if trades_filter is not None:  # a single-market run on its own securities' trades and quotes
        for key in ("trades", "quotes"):
            out = folder / f"{key}.parquet"
            pl.read_parquet(config["inputs"][key]).filter(trades_filter).write_parquet(out)
            config["inputs"][key] = str(out)
    previous_bars = previous_daily = None
    monthly = []
    for month in MONTHS:
        f = {k: str(folder / f"{k}-{month}.parquet") for k in ("trades", "audit", "quotes", "bars", "daily", "monthly")}
        run_clean(month, f["trades"], f["audit"], f["quotes"], **for_job(config, run_clean))
        run_bars_month(f["trades"], f["bars"], f["quotes"], **for_job(config, run_bars_month))
        run_daily_month(f["bars"], previous_bars, f["daily"], **for_job(config, run_daily_month))
        run_measures_month(f["daily"], previous_daily, f["monthly"], **for_job(config, run_measures_month))
        previous_bars, previous_daily = f["bars"], f["daily"]
        monthly.append(pl.read_parquet(f["monthly"]))
    return pl.concat(monthly, how="diagonal_relaxed").sort("security", "month")


def _audit(tmp_path, tag: str) -> pl.DataFrame:
    return pl.concat([pl.read_parquet(tmp_path / tag / f"audit-{m}.parquet") for m in MONTHS], how="diagonal_relaxed")


def _two_market_config(tmp_path, *, fx=True) -> dict:
    config = _base(tmp_path)
    config.pop("market")
    config["markets"] = {"column": "exch", "profiles": {"HBR": "demo", "QRW": _profile(tmp_path)},
                         "reporting_currency": "ZZH"}
    config["inputs"]["securities"] = str(tmp_path / "securities.csv")
    if fx:
        days = pl.date_range(pl.date(2021, 2, 1), pl.date(2021, 5, 31), eager=True)
        pl.DataFrame({"Day": days, "Ccy": "ZZQ", "Px": RATE}).write_csv(tmp_path / "fx.csv")
        config["inputs"]["fx"] = str(tmp_path / "fx.csv")
        config["columns"]["fx"] = {"Day": "date", "Ccy": "currency", "Px": "rate"}
    return validate_config(config)


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    tmp_path = tmp_path_factory.mktemp("markets")
    codes = _split(tmp_path)
    both = _measure(_two_market_config(tmp_path), "both", tmp_path)
    singles = {}
    for code, profile in (("HBR", "demo"), ("QRW", _profile(tmp_path))):
        config = _base(tmp_path)
        config["market"] = profile
        mine = codes.filter(pl.col("exch") == code).get_column("security")
        singles[code] = _measure(validate_config(config), code, tmp_path, pl.col("security").is_in(mine.to_list()))
    return codes, both, singles, tmp_path


def test_two_markets_equal_the_single_market_runs(runs):
    # identity of the design (README "Several markets and currencies"): each security is measured on its own
    # market's profile, so a two-market run repeats each single-market run on that market's securities
    codes, both, singles, tmp_path = runs
    scaled = {"amihud", "amivest", "ps_gamma", "kyle_lambda"}  # in currency units: checked in the FX test
    for code, single in singles.items():
        mine = both.join(codes.filter(pl.col("exch") == code).rename({"exch": "_c"}), on="security").drop("_c")
        assert mine.height == single.height > 0
        columns = [c for c in single.columns if c not in scaled or code == "HBR"]
        assert_frame_equal(mine.select(columns), single.select(columns), check_column_order=False)


def test_half_day_of_one_market_only(runs):
    # the second market closes at 12:00 on 2021-03-16 (its profile, invented): its trades after noon that day
    # are dropped as outside the session, the first market's are not (common practice: sessions per market)
    codes, both, singles, tmp_path = runs
    day = _audit(tmp_path, "both").filter((pl.col("table") == "trades") & (pl.col("date") == pl.date(2021, 3, 16)))
    day = day.join(codes, on="security")
    dropped = dict(day.group_by("exch").agg(pl.col("drop_outside_session").sum()).iter_rows())
    assert dropped["HBR"] == 0 and dropped["QRW"] > 0
    single = _audit(tmp_path, "QRW").filter((pl.col("table") == "trades") & (pl.col("date") == pl.date(2021, 3, 16)))
    assert single["drop_outside_session"].sum() == dropped["QRW"]


def test_fx_scales_amounts_by_the_rate(runs):
    # Amihud (2002): |r| / DV, so DV x rate divides it by the rate; Amivest (Cooper, Groth & Avera 1985)
    # is DV / |r|, multiplied by it; Pastor & Stambaugh (2003) gamma's regressor is DV, so gamma / rate
    codes, both, singles, tmp_path = runs
    single = singles["QRW"]
    mine = both.join(single.select("security", "month"), on=["security", "month"])
    np.testing.assert_allclose(mine["amihud"].to_numpy(), single["amihud"].to_numpy() / RATE, rtol=1e-12)
    np.testing.assert_allclose(mine["amivest"].to_numpy(), single["amivest"].to_numpy() * RATE, rtol=1e-12)
    np.testing.assert_allclose(mine["ps_gamma"].to_numpy(), single["ps_gamma"].to_numpy() / RATE, rtol=1e-6)
    # Kyle (1985) lambda regresses a log midpoint change on signed sqrt(currency traded): / sqrt(rate)
    np.testing.assert_allclose(mine["kyle_lambda"].to_numpy(), single["kyle_lambda"].to_numpy() / np.sqrt(RATE),
                               rtol=1e-10)
    assert np.isfinite(mine["amihud"].to_numpy()).sum() > 10 and np.isfinite(mine["kyle_lambda"].to_numpy()).sum() > 10


def test_missing_fx_day_names_currency_and_date(tmp_path):
    # common practice: a converted amount needs that day's rate; a gap is an error, never a silent hole
    _split(tmp_path)
    config = _two_market_config(tmp_path)
    rates = pl.read_csv(config["inputs"]["fx"]).filter(pl.col("Day") != "2021-03-17")
    rates.write_csv(tmp_path / "fx.csv")
    f = {k: str(tmp_path / f"{k}.parquet") for k in ("trades", "audit", "quotes", "bars", "daily")}
    run_clean("2021-03", f["trades"], f["audit"], f["quotes"], **for_job(config, run_clean))
    run_bars_month(f["trades"], f["bars"], f["quotes"], **for_job(config, run_bars_month))
    with pytest.raises(InputError, match=r"fx\.csv: no exchange rate for ZZQ on 2021-03-17"):
        run_daily_month(f["bars"], None, f["daily"], **for_job(config, run_daily_month))


def test_one_currency_needs_no_fx_file(tmp_path):
    # both markets in the reporting currency: no rates asked for, amounts unchanged (rate 1 by definition)
    _split(tmp_path)
    config = _two_market_config(tmp_path, fx=False)
    config["markets"]["reporting_currency"] = "ZZQ"
    config["markets"]["profiles"]["HBR"] = _profile(tmp_path)
    f = {k: str(tmp_path / f"{k}.parquet") for k in ("trades", "audit", "quotes", "bars", "daily")}
    check_inputs(**for_job(config, check_inputs))
    run_clean("2021-04", f["trades"], f["audit"], f["quotes"], **for_job(config, run_clean))
    run_bars_month(f["trades"], f["bars"], f["quotes"], **for_job(config, run_bars_month))
    run_daily_month(f["bars"], None, f["daily"], **for_job(config, run_daily_month))
    daily = pl.read_parquet(f["daily"])
    bars = pl.read_parquet(f["bars"])
    assert daily.get_column("market").unique().sort().to_list() == ["HBR", "QRW"]
    assert daily.get_column("dollar_volume").to_list() == bars.get_column("dollar_volume").to_list()


def test_unknown_code_and_unlisted_security_at_run_time(tmp_path):
    codes = _split(tmp_path)
    config = _two_market_config(tmp_path)
    codes.with_columns(pl.when(pl.int_range(pl.len()) == 3).then(pl.lit("ZZZ")).otherwise(pl.col("exch"))
                       .alias("exch")).write_csv(tmp_path / "securities.csv")
    with pytest.raises(InputError, match=r"securities\.csv: column 'exch' \(market\), data row 4 \(line 5 of the "
                                         r"CSV\), value 'ZZZ': market code not in `markets.profiles`"):
        check_inputs(**for_job(config, check_inputs))
    codes.slice(1).write_csv(tmp_path / "securities.csv")  # the first security left out
    first = codes.get_column("security")[0]
    with pytest.raises(InputError, match=rf"quotes\.parquet: column 'security', data row \d+, value '{first}': "
                                         "security not in the securities file"):
        run_clean("2021-03", *(str(tmp_path / f"{k}.parquet") for k in ("t", "a", "q")), **for_job(config, run_clean))


def test_market_values_at_the_month_end_rate(tmp_path):
    # common practice: a month-end stock at the month-end rate; log market value shifts by log(rate)
    from liqpanel.markets import several as marketset

    _split(tmp_path)
    config = _two_market_config(tmp_path)
    days = [dt(2021, 3, 30), dt(2021, 3, 31), dt(2021, 4, 29)]  # the last rate of April is on the 29th
    pl.DataFrame({"Day": days, "Ccy": "ZZQ", "Px": [2.0, 2.5, 0.5]}).write_csv(tmp_path / "fx.csv")
    codes = pl.read_csv(tmp_path / "securities.csv")
    hbr, qrw = (codes.filter(pl.col("exch") == c).item(0, "security") for c in ("HBR", "QRW"))
    panel = pl.DataFrame({"security": [hbr, qrw, qrw], "month": [dt(2021, 3, 1), dt(2021, 3, 1), dt(2021, 4, 1)],
                          "market_cap": [100.0, 100.0, 100.0], "log_size": [np.log(100.0)] * 3})
    out = marketset.panel_to_reporting(panel, config, marketset.load_markets(config))
    assert out.columns[:3] == ["security", "month", "market"]
    assert out["market"].to_list() == ["HBR", "QRW", "QRW"]
    np.testing.assert_allclose(out["market_cap"].to_numpy(), [100.0, 250.0, 50.0], rtol=1e-15)
    np.testing.assert_allclose(out["log_size"].to_numpy(), np.log([100.0, 250.0, 50.0]), rtol=1e-12)
    late = panel.with_columns(pl.lit(dt(2021, 5, 1)).alias("month")).slice(2)
    with pytest.raises(InputError, match="no exchange rate for ZZQ on 2021-05-31"):
        marketset.panel_to_reporting(late, config, marketset.load_markets(config))


def _daily_with_codes(tmp_path, codes: pl.DataFrame) -> dict:
    """The daily example (an invented vendor layout) with a market-code column, in two markets."""
    config = validate_config(one_market(yaml.safe_load(open("config/daily_example.yaml"))))
    daily = pl.read_csv("demo_data/daily_example.csv.gz", infer_schema_length=0).filter(
        pl.col("trade_day").str.starts_with("2021-0") & (pl.col("listing") == "HBR")).drop("listing")
    daily = daily.join(codes.rename({"security": "ticker"}), on="ticker", how="left")
    daily.write_csv(tmp_path / "daily.csv")
    config["inputs"].update(daily=str(tmp_path / "daily.csv"), fx=str(tmp_path / "fx.csv"))
    config["sample"] = {"start": "2021-01", "end": "2021-06"}
    config.pop("market")
    config["markets"] = {"column": "exch", "profiles": {"HBR": "demo", "QRW": _profile(tmp_path)},
                         "reporting_currency": "ZZH"}
    days = pl.date_range(pl.date(2020, 12, 1), pl.date(2021, 7, 31), eager=True)
    pl.DataFrame({"Day": days, "Ccy": "ZZQ", "Px": RATE}).write_csv(tmp_path / "fx.csv")
    config["columns"]["fx"] = {"Day": "date", "Ccy": "currency", "Px": "rate"}
    return validate_config(config)


def test_codes_from_the_daily_file(tmp_path):
    # the market code may come from the daily file itself; dollar volume times the day's rate (common practice)
    codes = _split(tmp_path)
    config = _daily_with_codes(tmp_path, codes)
    months = [f"2021-0{m}" for m in range(1, 7)]
    outs = [str(tmp_path / f"daily-{m}.parquet") for m in months]
    run_daily_file(months, outs, str(tmp_path / "audit.parquet"), str(tmp_path / "splits.parquet"),
        **for_job(config, run_daily_file))
    daily = pl.concat([pl.read_parquet(o) for o in outs])
    vendor = pl.read_csv("demo_data/daily_example.csv.gz", infer_schema_length=0).select(
        pl.col("ticker").alias("security"), pl.col("trade_day").str.to_date().alias("date"),
        pl.col("turnover_ccy").cast(pl.Float64).alias("raw"))
    got = daily.join(vendor, on=["security", "date"]).join(codes.rename({"exch": "_c"}), on="security")
    assert got.height == daily.height > 0
    assert (got["market"] == got["_c"]).all()
    factor = np.where(got["market"].to_numpy() == "QRW", RATE, 1.0)
    np.testing.assert_allclose(got["dollar_volume"].to_numpy(), got["raw"].to_numpy() * factor, rtol=1e-12)


def test_two_codes_for_one_security_in_the_daily_file(tmp_path):
    codes = _split(tmp_path)
    config = _daily_with_codes(tmp_path, codes)
    daily = pl.read_csv(tmp_path / "daily.csv", infer_schema_length=0)
    first = daily.item(0, "ticker")
    daily.with_columns(pl.when((pl.col("ticker") == first) & (pl.col("trade_day") == "2021-03-01"))
                       .then(pl.lit("QRW")).otherwise(pl.col("exch")).alias("exch")).write_csv(tmp_path / "daily.csv")
    with pytest.raises(InputError, match=rf"daily\.csv: column 'exch' \(market\), data row \d+ .*value 'QRW': "
                                         rf"security '{first}' has two market codes \(HBR, QRW\)"):
        check_inputs(**for_job(config, check_inputs))


def test_config_names_market_or_markets():
    config = yaml.safe_load(open(DEMO))
    del config["markets"]
    with pytest.raises(ConfigError, match="the top level: needs 'market' or 'markets'"):
        validate_config(config)
    config["markets"] = {"column": "exch", "profiles": {"HBR": "demo"}}
    with pytest.raises(ConfigError, match="markets: 'reporting_currency' is a required property"):
        validate_config(config)


@pytest.mark.parametrize("text, shown", [("NaN", "(missing)"), ("inf", "not finite"), ("0", "0.0")])
def test_rate_that_is_not_a_positive_finite_number(tmp_path, text, shown):
    from liqpanel.markets import several as marketset

    (tmp_path / "fx.csv").write_text(f"day,ccy,px\n2021-01-04,ZZQ,0.5\n2021-01-05,ZZQ,{text}\n")
    config = {"inputs": {"fx": str(tmp_path / "fx.csv")}, "columns": {"fx": {"day": "date", "ccy": "currency",
                                                                             "px": "rate"}}}
    with pytest.raises(InputError, match=rf"fx\.csv: column 'px' \(rate\), data row 2 .*value '?{re.escape(shown)}'?:"):
        marketset.read_fx(config)
