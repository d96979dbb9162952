"""The pre-flight check: every problem of a config and its inputs, listed at once, before any work.

Each case runs the command line (``liqpanel check-config`` or ``liqpanel
run``) on a config with one or more planted problems and asserts: exit
status 2, every planted problem named (with the file, the user's own column
and the row where there is one), no traceback, and no folder created or
deleted. Where a check rests on a fact of the trade, its source is named
beside it.
"""

from __future__ import annotations

import gzip
import re
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import polars as pl
import pytest
import yaml

from liqpanel.cli import main
from tests.demo_config import one_market

ROOT = Path(__file__).resolve().parents[1]
DAILY_FILE = ROOT / "demo_data" / "daily_example.csv.gz"


def _absolute(config: dict) -> dict:
    """Input paths made absolute, so the config runs from any folder."""
    inputs = config["inputs"]
    for key, value in inputs.items():
        if isinstance(value, str):
            inputs[key] = str(ROOT / value)
    for entry in inputs.get("characteristics", []):
        entry["path"] = str(ROOT / entry["path"])
    return config


def daily_config(tmp_path: Path) -> dict:
    """The daily example (an invented vendor layout), writing under ``tmp_path``."""
    config = _absolute(yaml.safe_load((ROOT / "config" / "daily_example.yaml").read_text()))
    config["run"].update(results_dir=str(tmp_path / "results"), work_dir=str(tmp_path / "work"))
    return config


def trades_config(tmp_path: Path) -> dict:
    """The demo run (trades and quotes), writing under ``tmp_path``."""
    config = _absolute(yaml.safe_load((ROOT / "config" / "config.yaml").read_text()))
    config["run"].update(results_dir=str(tmp_path / "results"), work_dir=str(tmp_path / "work"))
    return config


def tree(folder: Path) -> set[str]:
    return {str(p.relative_to(folder)) for p in folder.rglob("*")}


def check(tmp_path: Path, capsys, config: dict, *expected: str, command: str = "check-config") -> str:
    """Run the command on ``config``; assert exit 2, each expected text, no traceback, no folder made or removed."""
    path = tmp_path / "my.yaml"
    path.write_text(yaml.safe_dump(config, sort_keys=False))
    before = tree(tmp_path)
    args = ["check-config", str(path)] if command == "check-config" else [command, "--config", str(path)]
    code = main(args)
    captured = capsys.readouterr()
    err = captured.err
    assert code == 2, err
    assert "Traceback" not in err + captured.out
    for text in expected:
        assert text in err, f"{text!r} not in:\n{err}"
    assert tree(tmp_path) == before
    return err


def write_daily_csv(path: Path, rows: list[str], header: str = "ticker,trade_day,first_px,top_px,bottom_px,last_px,qty") -> Path:
    path.write_text("\n".join([header, *rows]) + "\n")
    return path


def small_daily(tmp_path: Path, rows: list[str]) -> dict:
    config = one_market(daily_config(tmp_path))
    config["inputs"]["daily"] = str(write_daily_csv(tmp_path / "vendor_daily.csv", rows))
    config["columns"]["daily"] = {"ticker": "security", "trade_day": "date", "first_px": "open", "top_px": "high",
                                  "bottom_px": "low", "last_px": "close", "qty": "volume"}
    config["inputs"]["characteristics"] = []
    config["inputs"]["returns"] = None
    config["models"] = {"regressions": [{"name": "roll_only", "regressors": ["roll_spread"]}]}
    return config


# ------------------------------------------------------------ the observed cases


def test_measure_option_of_the_wrong_type(tmp_path, capsys):
    config = daily_config(tmp_path)
    config["measures"]["roll_spread"]["min_days"] = "fifteen"
    check(tmp_path, capsys, config, "measures.roll_spread.min_days", "'fifteen'", "whole number of days")


def test_option_type_follows_the_registry_default(tmp_path, capsys):
    config = trades_config(tmp_path)
    config["measures"]["gibbs_spread"]["sweeps"] = "many"
    config["measures"]["cs_spread"]["negative"] = 0
    check(tmp_path, capsys, config, "measures.gibbs_spread.sweeps", "'many'", "a whole number (default 1000)",
          "measures.cs_spread.negative", "expected text (default 'zero')")


def test_model_variable_no_input_provides(tmp_path, capsys):
    config = daily_config(tmp_path)
    config["inputs"]["characteristics"] = []  # log_size came from there
    err = check(tmp_path, capsys, config, "models.regressions[roll_controls]", "'log_size'", "'book_to_market'",
                "which no input provides")
    assert "'roll_spread']" in err  # the columns the panel will have are listed


def test_value_weighted_sort_without_market_cap(tmp_path, capsys):
    # value weights are market capitalisation at the end of the sorting month (Fama & French 1993, from memory)
    config = daily_config(tmp_path)
    config["inputs"]["characteristics"][0]["variables"] = ["log_size", "book_to_market"]
    config["models"]["sorts"] = [{"name": "vw", "variable": "roll_spread", "portfolios": 3, "weight": "value"}]
    check(tmp_path, capsys, config, "models.sorts[vw]", "weight: value", "'market_cap'")


def test_missing_input_file(tmp_path, capsys):
    config = daily_config(tmp_path)
    config["inputs"]["returns"] = str(tmp_path / "returns_2021.parquet")
    check(tmp_path, capsys, config, f"{tmp_path / 'returns_2021.parquet'}: no such file (inputs.returns")


def test_glob_matching_no_file(tmp_path, capsys):
    config = daily_config(tmp_path)
    config["inputs"]["daily"] = str(tmp_path / "daily_*.csv")
    check(tmp_path, capsys, config, "no file matches the pattern (inputs.daily")


def test_mapping_names_a_column_the_file_lacks(tmp_path, capsys):
    config = daily_config(tmp_path)
    del config["columns"]["daily"]["last_px"]
    config["columns"]["daily"]["Last_Price"] = "close"
    err = check(tmp_path, capsys, config, str(DAILY_FILE), "maps column 'Last_Price' (to our 'close')",
                "'last_px'")  # the file's own columns are listed
    assert "needs column 'close'" in err  # and the consequence, in the same run


def test_results_folder_that_cannot_be_written(tmp_path, capsys):
    config = daily_config(tmp_path)
    blocker = tmp_path / "not_a_folder"
    blocker.write_text("a file where a folder should be\n")
    config["run"]["results_dir"] = str(blocker / "results")
    config["run"]["work_dir"] = str(blocker / "work")
    check(tmp_path, capsys, config, "run.results_dir", "run.work_dir", "is a file, not a folder")


def test_unknown_market_profile(tmp_path, capsys):
    config = daily_config(tmp_path)
    config.pop("markets"), config["inputs"].pop("fx")
    config["market"] = "atlantis"
    check(tmp_path, capsys, config, "market: market profile 'atlantis' not found", "known profiles: demo")


def _two_markets(tmp_path: Path, codes: list[str]) -> dict:
    """The demo run split over two markets by a securities file with the invented codes ``codes``."""
    config = trades_config(tmp_path)
    names = pl.read_parquet(ROOT / "demo_data" / "securities.parquet").get_column("security").sort().to_list()
    (tmp_path / "listing.csv").write_text("ticker,exch\n" + "".join(
        f"{name},{codes[i % len(codes)]}\n" for i, name in enumerate(names)))
    config["inputs"].pop("fx")
    config["markets"] = {"column": "exch", "profiles": {"HBR": "demo", "KPX": "kestrel"}, "reporting_currency": "ZZH"}
    config["inputs"]["securities"] = str(tmp_path / "listing.csv")
    config["columns"] = {"securities": {"ticker": "security"}}
    return config


def test_unknown_market_code(tmp_path, capsys):
    # the second data row's code is not a key of markets.profiles: file, the user's column, row, value
    config = _two_markets(tmp_path, ["HBR", "XYZ"])
    config["inputs"]["fx"] = None
    check(tmp_path, capsys, config, "listing.csv", "column 'exch' (market), data row 2",
          "value 'XYZ': market code not in `markets.profiles` (HBR, KPX)")


def test_foreign_market_without_fx(tmp_path, capsys):
    # kestrel's currency ZZK is not the reporting ZZH: its rates are needed
    config = _two_markets(tmp_path, ["HBR", "KPX"])
    check(tmp_path, capsys, config, "inputs.fx: markets KPX (ZZK) are not in the reporting currency ZZH")


def test_fx_rate_that_is_not_positive(tmp_path, capsys):
    config = _two_markets(tmp_path, ["HBR", "KPX"])
    (tmp_path / "rates.csv").write_text("day,ccy,px\n2021-01-04,ZZK,0.5\n2021-01-05,ZZK,-1\n")
    config["inputs"]["fx"] = str(tmp_path / "rates.csv")
    config["columns"]["fx"] = {"day": "date", "ccy": "currency", "px": "rate"}
    check(tmp_path, capsys, config, "rates.csv", "column 'px' (rate), data row 2", "value -1.0",
          "positive finite number")


def test_per_market_words_in_a_one_market_run(tmp_path, capsys):
    config = one_market(trades_config(tmp_path))
    config["models"]["sorts"][0]["breakpoints"] = "per_market"
    check(tmp_path, capsys, config, "models.sorts[roll_terciles]: breakpoints: per_market needs several markets")
    config = one_market(trades_config(tmp_path))
    config["models"]["regressions"][0].update(estimator="pooled", covariance="clustered", cluster=["market"])
    check(tmp_path, capsys, config, "models.regressions[roll_only]: market effects or clusters need several markets")


# ------------------------------------------------------------ measures and their inputs


def test_effective_spread_needs_quotes(tmp_path, capsys):
    # the effective spread compares the trade price with the quote midpoint (Huang & Stoll 1996, from memory)
    config = trades_config(tmp_path)
    config["inputs"]["quotes"] = None
    config["models"]["validation"] = None
    del config["models"]["validation"]
    err = check(tmp_path, capsys, config, "measure 'effective_spread' needs daily column(s)", "add `inputs: quotes:`")
    for name in ("quoted_spread", "realized_spread", "price_impact"):
        assert f"measure '{name}'" in err


def test_spread_benchmark_from_a_daily_file_without_it(tmp_path, capsys):
    config = daily_config(tmp_path)
    config["measures"]["effective_spread"] = {}
    check(tmp_path, capsys, config, "measures.effective_spread", str(DAILY_FILE), "will not provide")


def test_turnover_needs_shares_outstanding(tmp_path, capsys):
    # turnover = volume / shares outstanding (common practice)
    config = daily_config(tmp_path)
    del config["columns"]["daily"]["shares_outstanding"]
    config["measures"]["turnover"] = {}
    check(tmp_path, capsys, config, "measure 'turnover' needs daily column(s) ['shares_out']", "columns.daily")


def test_cleaning_rule_on_a_column_the_trades_lack(tmp_path, capsys):
    # venue and sale-condition filters (Barndorff-Nielsen, Hansen, Lunde & Shephard 2009, P3 and T2)
    config = trades_config(tmp_path)
    config["clean"]["venues"] = ["NORTH"]
    config["clean"]["conditions"] = {"codes": {"Z9": "drop"}}
    check(tmp_path, capsys, config, "trades.parquet: clean.venues is set but the trades file has no column 'venue'",
          "clean.conditions is set", "'cond'")


def test_daily_file_lacks_a_required_column(tmp_path, capsys):
    config = small_daily(tmp_path, ["AX1,2021-01-04,10,11,9,10.5,100"])
    config["columns"]["daily"].pop("qty")
    check(tmp_path, capsys, config, "vendor_daily.csv", "needs column 'volume'", "'qty'")


def test_validation_benchmark_no_measure_computes(tmp_path, capsys):
    config = daily_config(tmp_path)
    config["models"]["validation"] = {"benchmark": "effective_spread", "proxies": ["roll_spread", "cs_spread"]}
    check(tmp_path, capsys, config, "models.validation.benchmark", "'effective_spread'", "models.validation.proxies",
          "'cs_spread'")


def test_factor_size_variable_absent(tmp_path, capsys):
    config = daily_config(tmp_path)
    config["inputs"]["characteristics"][0]["variables"] = ["market_cap"]
    config["models"] = {"factor": {"measure": "roll_spread"}}  # size groups default to log_size
    check(tmp_path, capsys, config, "models.factor", "forms size groups on 'log_size'")


def test_panel_transform_of_an_absent_variable(tmp_path, capsys):
    config = daily_config(tmp_path)
    config["panel"] = {"log": ["amihud", "turnover"], "winsorize": {"variables": ["log_turnover"]}}
    check(tmp_path, capsys, config, "panel.log", "takes the log of 'turnover'")


def test_monthly_returns_asked_for_but_not_given(tmp_path, capsys):
    config = daily_config(tmp_path)
    config["inputs"]["returns"] = None
    config["panel"] = {"return_source": "monthly_file"}
    check(tmp_path, capsys, config, "panel.return_source: is 'monthly_file' but `inputs: returns:` names no file")


def test_characteristic_the_file_lacks(tmp_path, capsys):
    config = daily_config(tmp_path)
    config["inputs"]["characteristics"][0]["variables"].append("dividend_yield")
    check(tmp_path, capsys, config, "characteristics.parquet", "needs column 'dividend_yield'")


# ------------------------------------------------------------ files and dates


def test_date_that_does_not_parse_names_file_column_row_value(tmp_path, capsys):
    # 2021-13-02 is no calendar date (ISO 8601 months run 01-12)
    rows = ["AX1,2021-01-04,10,11,9,10.5,100", "AX1,2021-01-05,10,11,9,10.5,100", "AX1,2021-13-02,10,11,9,10.5,100"]
    config = small_daily(tmp_path, rows)
    check(tmp_path, capsys, config, "vendor_daily.csv", "data row 3 (line 4 of the CSV)", "'trade_day' (date)", "'2021-13-02'")


def test_whole_number_dates_are_read_as_yyyymmdd_never_as_days(tmp_path, capsys):
    # 18631 read as a count of days since 1970-01-01 would be 2021-01-04 (ISO 8601 calendar); as a
    # whole-number date it is no YYYYMMDD date, so it is refused, while 20210104 reads as 2021-01-04
    config = small_daily(tmp_path, [])
    daily = tmp_path / "vendor_daily.parquet"
    pl.DataFrame({"ticker": ["AX1", "AX1"], "trade_day": [20210104, 18631], "first_px": [10.0, 10.0],
                  "top_px": [11.0, 11.0], "bottom_px": [9.0, 9.0], "last_px": [10.5, 10.5],
                  "qty": [100.0, 100.0]}).write_parquet(daily)
    config["inputs"]["daily"] = str(daily)
    check(tmp_path, capsys, config, "vendor_daily.parquet", "column 'trade_day' (date), data row 2", "'18631'",
          "YYYYMMDD")


def test_trade_timestamp_that_does_not_parse(tmp_path, capsys):
    trades = tmp_path / "vendor_trades.csv"
    trades.write_text("SYM,STAMP,PX,QTY\nAX1,2021-01-04 10:00:00,10.0,100\nAX1,noon on monday,10.1,200\n")
    config = trades_config(tmp_path)
    config["inputs"]["trades"] = str(trades)
    config["columns"] = {"trades": {"SYM": "security", "STAMP": "ts", "PX": "price", "QTY": "size"}}
    check(tmp_path, capsys, config, "vendor_trades.csv", "data row 2 (line 3)", "'STAMP' (ts)", "'noon on monday'")


def test_empty_csv(tmp_path, capsys):
    config = daily_config(tmp_path)
    empty = tmp_path / "daily.csv"
    empty.write_text("")
    config["inputs"]["daily"] = str(empty)
    check(tmp_path, capsys, config, f"{empty}: the file is empty")


def test_damaged_parquet(tmp_path, capsys):
    config = daily_config(tmp_path)
    damaged = tmp_path / "returns.parquet"
    damaged.write_bytes(b"PAR1 this is not a Parquet file")
    config["inputs"]["returns"] = str(damaged)
    check(tmp_path, capsys, config, f"{damaged}: does not open as Parquet")


def test_returns_file_without_a_return_column(tmp_path, capsys):
    returns = tmp_path / "monthly.parquet"
    frame = pl.DataFrame({"security": ["AX1"], "month": ["2021-01-01"], "total_return": [0.01]})
    frame.with_columns(pl.col("month").str.to_date()).write_parquet(returns)
    config = daily_config(tmp_path)
    config["inputs"]["returns"] = str(returns)
    check(tmp_path, capsys, config, f"{returns}", "the returns table needs column 'ret'", "'total_return'")


def test_gzip_csv_header_read_with_the_separator(tmp_path, capsys):
    daily = tmp_path / "daily.csv.gz"
    with gzip.open(daily, "wt") as fh:
        fh.write("ticker;trade_day;first_px;top_px;bottom_px;last_px;qty\nAX1;2021-01-04;10;11;9;10.5;100\n")
    config = small_daily(tmp_path, [])
    config["inputs"]["daily"] = str(daily)
    # read with the default separator the header is one column named after all seven
    check(tmp_path, capsys, config, "maps column 'ticker'", "'ticker;trade_day;first_px;top_px;bottom_px;last_px;qty'")


# ------------------------------------------------------------ all at once, and before any work


def test_every_problem_is_listed_at_once(tmp_path, capsys):
    config = daily_config(tmp_path)
    config["measures"]["amihud"] = {"min_days": 0}
    config["measurs"] = {}  # a misspelled key: a schema error, listed with the rest
    config["inputs"]["returns"] = str(tmp_path / "absent.parquet")
    config["columns"]["daily"]["VOL"] = "volume"
    config.pop("markets"), config["inputs"].pop("fx")
    config["market"] = "atlantis"
    config["inputs"]["characteristics"][0]["variables"] = ["log_size", "book_to_market"]
    config["models"]["sorts"] = [{"name": "vw", "variable": "roll_spread", "weight": "value",
                                  "characteristics": ["beta"]}]
    err = check(tmp_path, capsys, config, "unknown key 'measurs'", "measures.amihud.min_days", "absent.parquet",
                "maps column 'VOL'", "profile 'atlantis'", "weight: value), which needs the column 'market_cap'",
                "'beta'")
    assert "7 problems found; nothing was run" in err


def test_values_of_the_wrong_kind_everywhere(tmp_path, capsys):
    config = daily_config(tmp_path)
    config["models"] = {"regressions": "roll", "factor": "x"}
    config["inputs"]["characteristics"] = "chars.parquet"
    config["panel"] = {"log": "amihud"}
    config["columns"] = {"daily": ["ticker"]}
    config["study"] = "yes"
    config["measures"] = {"roll_spread": "fast", "amihud": {"scale": "big"}}
    check(tmp_path, capsys, config, "models.regressions: expected array, got 'roll'", "models.factor",
          "inputs.characteristics", "panel.log", "columns.daily: expected object", "study: expected object",
          "measures.roll_spread", "measures.amihud.scale", "'big'", "needs columns 'security', 'date'")


def test_run_stops_before_any_work(tmp_path, capsys):
    config = daily_config(tmp_path)
    config["measures"]["roll_spread"]["min_days"] = "fifteen"
    config["inputs"]["returns"] = str(tmp_path / "absent.parquet")
    check(tmp_path, capsys, config, "'fifteen'", "absent.parquet", command="run")
    assert not (tmp_path / "work").exists() and not (tmp_path / "results").exists()


def test_unreadable_config(tmp_path, capsys):
    path = tmp_path / "my.yaml"
    path.write_text("sample: [unclosed\n")
    assert main(["check-config", str(path)]) == 2
    err = capsys.readouterr().err
    assert f"config file {path} is not valid YAML" in err and "Traceback" not in err
    assert main(["check-config", str(tmp_path / "none.yaml")]) == 2
    assert "does not exist" in capsys.readouterr().err


def test_sample_beyond_the_data_is_a_warning(tmp_path, capsys):
    config = daily_config(tmp_path)
    config["sample"] = {"start": "2020-07", "end": "2022-12"}
    path = tmp_path / "my.yaml"
    path.write_text(yaml.safe_dump(config))
    assert main(["check-config", str(path)]) == 0
    err = capsys.readouterr().err
    # the invented market's daily file starts in January 2021 (demo_data/README.md)
    assert f"warning: {DAILY_FILE}: its dates run from 2021-01-" in err and "sample is 2020-07 to 2022-12" in err


def test_trades_beyond_the_sample_are_a_warning(tmp_path, capsys):
    config = trades_config(tmp_path)
    config["sample"]["end"] = "2023-03"
    path = tmp_path / "my.yaml"
    path.write_text(yaml.safe_dump(config))
    assert main(["check-config", str(path)]) == 0
    err = capsys.readouterr().err
    # the invented market's trades run from 2021-01 to 2022-12, business days (demo_data/README.md)
    assert f"warning: {ROOT / 'demo_data' / 'trades.parquet'}: its dates run from 2021-01-01 to 2022-12-30" in err


def test_valid_configs_pass(tmp_path, capsys):
    for config in (daily_config(tmp_path), trades_config(tmp_path)):
        path = tmp_path / "my.yaml"
        path.write_text(yaml.safe_dump(config))
        assert main(["check-config", str(path)]) == 0
        captured = capsys.readouterr()
        assert "valid" in captured.out and captured.err == ""
    assert not (tmp_path / "work").exists() and not (tmp_path / "results").exists()


# ------------------------------------------------------------ the workflow itself


def _liqpanel(*args: str, **kwargs) -> subprocess.Popen:
    """``liqpanel`` in a subprocess, with Ctrl-C handled as in a terminal."""
    return subprocess.Popen(
        [sys.executable, "-m", "liqpanel.cli", *args], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        start_new_session=True, preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL), **kwargs,
    )


def test_plain_snakemake_is_checked_too(tmp_path):
    config = daily_config(tmp_path)
    config["measures"]["roll_spread"]["min_days"] = "fifteen"
    config.pop("markets"), config["inputs"].pop("fx")
    config["market"] = "atlantis"
    path = tmp_path / "my.yaml"
    path.write_text(yaml.safe_dump(config))
    done = subprocess.run(
        [sys.executable, "-m", "snakemake", "--snakefile", str(ROOT / "Snakefile"), "--configfile", str(path),
         "--cores", "1", "--dry-run", "all"], cwd=tmp_path, capture_output=True, text=True,
    )
    assert done.returncode != 0
    assert "'fifteen'" in done.stderr and "profile 'atlantis'" in done.stderr
    assert "Traceback" not in done.stderr


@pytest.mark.slow
def test_failed_run_keeps_the_users_empty_results_folder(tmp_path):
    # the first rows parse (the pre-flight sample), a later one does not: the run fails in the daily stage
    good = [f"AX1,2021-01-{d:02d},10,11,9,10.5,100" for d in range(4, 29)]
    config = small_daily(tmp_path, good * 50 + ["AX1,2021-02-30,10,11,9,10.5,100"])
    config["sample"] = {"start": "2021-01", "end": "2021-02"}
    (tmp_path / "results").mkdir()
    path = tmp_path / "my.yaml"
    path.write_text(yaml.safe_dump(config))
    child = _liqpanel("run", "--config", str(path), "--cores", "1", cwd=tmp_path)
    out, err = child.communicate(timeout=600)
    assert child.returncode != 0
    assert "2021-02-30" in err or "not YYYY-MM-DD" in err
    assert (tmp_path / "results").is_dir() and not any((tmp_path / "results").iterdir())


@pytest.mark.slow
def test_ctrl_c_stops_with_one_line_and_resumes(tmp_path):
    config = daily_config(tmp_path)
    (tmp_path / "results").mkdir()
    path = tmp_path / "my.yaml"
    path.write_text(yaml.safe_dump(config))
    child = _liqpanel("run", "--config", str(path), "--cores", "1", cwd=tmp_path)
    deadline = time.time() + 300
    while not (tmp_path / "work" / "daily").exists() and time.time() < deadline:  # jobs have started
        time.sleep(0.1)
    os.killpg(child.pid, signal.SIGINT)
    out, err = child.communicate(timeout=300)
    assert child.returncode == 130, err
    assert err.strip().splitlines()[-1] == "liqpanel: stopped; run the same command again to resume"
    assert "Traceback" not in err + out and "KeyboardInterrupt" not in err
    assert (tmp_path / "results").is_dir()
    again = _liqpanel("run", "--config", str(path), "--cores", "1", cwd=tmp_path)
    out, err = again.communicate(timeout=600)
    assert again.returncode == 0, err
    assert (tmp_path / "results" / "latest" / "tables" / "regressions.csv").exists()
    shutil.rmtree(tmp_path / "work")


# ------------------------------------------------------------ the starter config for a daily file


def _map_suggestions(text: str) -> str:
    """What a user does with the starter: uncomment every suggested mapping."""
    return re.sub(r"(?m)^    # ([A-Za-z_]+): +([a-z_]+) +#.*$", r"    \1: \2", text)


def test_daily_starter_maps_the_invented_vendor_layout(tmp_path, capsys):
    out = tmp_path / "my.yaml"
    assert main(["daily-starter", str(DAILY_FILE), "--out", str(out)]) == 0
    text = out.read_text()
    # as written, every mapping is commented: the check names the file's columns and ours it needs
    assert main(["check-config", str(out)]) == 2
    err = capsys.readouterr().err
    assert "columns.daily is empty" in err and "'security', 'date', 'open'" in err and "'trade_day'" in err
    assert "Traceback" not in err
    # the file's dates: the invented market runs from January 2021 to December 2022 (demo_data/README.md)
    assert 'start: "2021-01"' in text and 'end: "2022-12"' in text
    mapped = tmp_path / "mapped.yaml"
    mapped.write_text(_map_suggestions(text))
    assert main(["check-config", str(mapped)]) == 0, capsys.readouterr().err
    # the suggestions are the mapping written by hand for the same layout (config/daily_example.yaml)
    by_hand = yaml.safe_load((ROOT / "config" / "daily_example.yaml").read_text())["columns"]["daily"]
    assert yaml.safe_load(mapped.read_text())["columns"]["daily"] == by_hand
    # only the sections that apply to daily data
    sections = set(yaml.safe_load(mapped.read_text()))
    assert sections == {"run", "sample", "market", "inputs", "columns", "measures", "panel", "models"}


def test_daily_starter_for_a_file_in_our_names(tmp_path, capsys):
    daily = tmp_path / "bars.parquet"
    pl.read_csv(DAILY_FILE).rename({"ticker": "security", "trade_day": "date", "first_px": "open", "top_px": "high",
                                    "bottom_px": "low", "last_px": "close", "qty": "volume"}).head(400).write_parquet(daily)
    out = tmp_path / "my.yaml"
    assert main(["daily-starter", str(daily), "--out", str(out)]) == 0
    text = out.read_text()
    assert "# date:" in text and "already our name" in text
    assert main(["daily-starter", str(daily), "--out", str(out)]) == 2  # an existing file is kept
    assert "exists already" in capsys.readouterr().err
    mapped = tmp_path / "mapped.yaml"
    mapped.write_text(_map_suggestions(text))
    assert main(["check-config", str(mapped)]) == 0, capsys.readouterr().err


def test_daily_starter_for_a_missing_file(tmp_path, capsys):
    assert main(["daily-starter", str(tmp_path / "none.csv"), "--out", str(tmp_path / "my.yaml")]) == 2
    err = capsys.readouterr().err
    assert "none.csv: no such file" in err and not (tmp_path / "my.yaml").exists()


def test_daily_starter_reads_the_header_with_the_separator(tmp_path, capsys):
    daily = tmp_path / "bars.csv"
    daily.write_text("sym;day;o;h;l;c;v\nAX1;2021-01-04;10;11;9;10.5;100\nAX1;2021-03-05;10;11;9;10.5;100\n")
    out = tmp_path / "my.yaml"
    assert main(["daily-starter", str(daily), "--out", str(out), "--separator", ";"]) == 0
    mapping = yaml.safe_load(_map_suggestions(out.read_text()))["columns"]["daily"]
    assert mapping == {"sym": "security", "day": "date", "o": "open", "h": "high", "l": "low", "c": "close",
                       "v": "volume"}
    assert 'start: "2021-01"' in out.read_text() and 'end: "2021-03"' in out.read_text()
    assert 'separator: ";"' in out.read_text()


def test_the_study_alone_is_not_held_to_the_models(tmp_path):
    from liqpanel.preflight import errors, preflight, warnings

    config = one_market(trades_config(tmp_path))
    config["inputs"] = {"trades": config["inputs"]["trades"]}  # no quotes, no characteristics
    # the whole run needs them: log_size for the models, quotes for the effective spread
    assert any("'log_size'" in p.message for p in errors(preflight(config)))
    # the study fits no model; the quote-based measures will be missing, which is worth a warning only
    study = preflight(config, target="study")
    assert errors(study) == []
    assert any("measure 'effective_spread' needs" in p.message for p in warnings(study))


def test_date_sample_check_reads_the_declared_format_and_missing_tokens(tmp_path):
    from liqpanel.preflight import FILE_CHECKS, InputSource, check_date_sample, check_files

    assert check_date_sample in FILE_CHECKS
    daily = tmp_path / "bars.csv"
    daily.write_text("s;d;o;h;l;c;v\n"
                     "AX1;04/01/2021;1;1;1;1;1\nAX1;-;1;1;1;1;1\nAX1;31/02/2021;1;1;1;1;1\n")  # 31 February: no such day
    source = InputSource(key="daily", table="daily", path=str(daily), date_column="date",
                         mapping={"s": "security", "d": "date", "o": "open", "h": "high", "l": "low", "c": "close",
                                  "v": "volume"},
                         formats={"separator": ";", "date_format": "%d/%m/%Y", "missing": ["-"]})
    assert check_files(source) == []
    [problem] = check_date_sample(source)
    assert "column 'd' (date), data row 3 (line 4 of the CSV), value '31/02/2021'" in str(problem)
    assert "the format '%d/%m/%Y'" in str(problem)
