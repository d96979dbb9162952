"""End to end: the Snakemake workflow on a tiny invented market.

Runs the whole chain (clean -> bars -> measures -> panel -> models -> report)
in a temporary directory, twice, and checks the outputs and that the second
run, in another directory with its inputs copied to another path, gives the
same run-id and byte-identical CSV and LaTeX tables.
"""

import json
import shutil
import subprocess
import sys
from pathlib import Path

import polars as pl
import pytest
import yaml

from liqpanel.simulate import SimulationSpec, simulate_market, write_market
from tests.demo_config import one_market

REPO = Path(__file__).resolve().parents[1]

pytestmark = pytest.mark.slow


def _config(data: Path) -> dict:
    cfg = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    cfg["sample"] = {"start": "2021-01", "end": "2021-08"}
    cfg["inputs"] = {
        "trades": str(data / "trades.parquet"),
        "quotes": str(data / "quotes.parquet"),
        "returns": str(data / "returns.parquet"),
        "truth": str(data / "truth.parquet"),
        "factors": str(data / "factors.parquet"),
        "characteristics": [
            {
                "name": "market_data",
                "path": str(data / "characteristics.parquet"),
                "date_column": "date",
                "lag_months": 0,
                "variables": ["market_cap", "log_size", "book_to_market", "past_ret_12m"],
            }
        ],
    }
    cfg = one_market(cfg)
    cfg["models"]["regressions"] = [
        {"name": "roll_only", "regressors": ["roll_spread"], "estimator": "fama_macbeth", "lags": 2},
        {"name": "roll_size", "regressors": ["roll_spread", "log_size"], "estimator": "fama_macbeth", "lags": 2},
    ]
    cfg["measures"]["roll_spread"]["convention"] = "zero"
    cfg["study"]["draws"] = 400  # the estimator study runs inside the full run; keep it small here
    return cfg


def _snakemake(workdir: Path, configfile: Path) -> subprocess.CompletedProcess:
    cmd = [
        sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory", str(workdir),
        "--configfile", str(configfile), "--cores", "2", "--force-use-threads", "--quiet", "rules", "--", "all",
    ]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=600)


@pytest.fixture(scope="module")
def tiny_market(tmp_path_factory):
    data = tmp_path_factory.mktemp("market")
    write_market(simulate_market(SimulationSpec(n_securities=12, n_months=8, seed=11, bad_row_share=0.01)), data)
    return data


def _run(tmp: Path, data: Path) -> Path:
    tmp.mkdir(parents=True, exist_ok=True)
    cfg = tmp / "config.yaml"
    cfg.write_text(yaml.safe_dump(_config(data)))
    done = _snakemake(tmp, cfg)
    assert done.returncode == 0, done.stderr[-4000:]
    latest = tmp / "results" / "latest"
    assert latest.is_symlink()
    return latest.resolve()


def test_workflow_end_to_end_is_reproducible(tmp_path, tiny_market):
    first = _run(tmp_path / "a", tiny_market)
    for part in ("tables", "figures", "data", "manifest.json"):
        assert (first / part).exists(), part
    table = pl.read_csv(first / "tables" / "regressions.csv")
    coef = table.filter((pl.col("model") == "roll_only") & (pl.col("variable") == "roll_spread")).row(0, named=True)
    # the published table against the reference library on the run's own panel:
    # linearmodels' FamaMacBeth with a Bartlett kernel of 2 lags (Newey & West 1987)
    from linearmodels.panel import FamaMacBeth

    frame = (
        pl.read_parquet(first / "data" / "panel.parquet")
        .select("security", "month", "ret_next", "roll_spread")
        .drop_nulls()
        .filter(pl.col("ret_next").is_finite() & pl.col("roll_spread").is_finite())
        .to_pandas()
        .set_index(["security", "month"])
    )
    frame["const"] = 1.0
    ref = FamaMacBeth(frame["ret_next"], frame[["const", "roll_spread"]]).fit(
        cov_type="kernel", kernel="bartlett", bandwidth=2.0, debiased=True
    )
    assert coef["coef"] == pytest.approx(ref.params["roll_spread"], rel=1e-9)
    assert coef["std_error"] == pytest.approx(ref.std_errors["roll_spread"], rel=1e-9)
    assert (first / "figures" / "spread_median.png").exists()
    assert (first / "tables" / "study_estimators.csv").exists()  # compared byte for byte below
    assert (first / "figures" / "effective_spread_median.png").exists()
    truth = pl.read_csv(first / "tables" / "spread_vs_truth.csv")
    effective = truth.filter(pl.col("measure") == "effective_spread").row(0, named=True)
    assert abs(effective["mean_bias"]) < 1e-3 * effective["mean_truth"] + 1e-5  # 2 tanh(c) against 2c
    assert (first / "tables" / "regressions.tex").read_text().count(r"\toprule") == 1
    # the factors stage: its tables and the factor series, one row per month, months unique
    assert (first / "tables" / "liquidity_aggregate.csv").exists()
    stored = pl.read_parquet(first / "factors.parquet")
    factors = pl.read_csv(first / "factors.csv", schema=stored.schema)
    assert factors.columns[0] == "month" and "liq_innovation" in factors.columns
    assert factors.equals(stored)  # the CSV holds the same numbers, full precision
    assert factors.get_column("month").is_unique().all() and factors.get_column("month").is_sorted()
    audit = pl.read_csv(first / "tables" / "cleaning_audit.csv")
    assert set(audit["table"]) == {"trades", "quotes"}
    for table in ("trades", "quotes"):
        part = audit.filter(pl.col("table") == table)
        counts = dict(zip(part["rows"], part["count"]))
        dropped = sum(v for k, v in counts.items() if k.startswith("dropped"))
        assert counts["kept"] + dropped == counts["read"]
    trades_audit = audit.filter(pl.col("table") == "trades")
    trades = dict(zip(trades_audit["rows"], trades_audit["count"]))
    for rule in ("nonpositive", "outside_session", "duplicate"):  # the simulator's planted bad rows
        assert trades[f"dropped: {rule}"] > 0
    manifest = json.loads((first / "manifest.json").read_text())
    listed = {o["path"] for o in manifest["outputs"]}
    assert "tables/regressions.csv" in listed and manifest["run_id"] == first.name

    moved = shutil.copytree(tiny_market, tmp_path / "elsewhere" / "market")
    second = _run(tmp_path / "b", moved)
    assert second.name == first.name  # same input contents at another path, same run-id
    tables = sorted((first / "tables").glob("*.*"))
    assert {p.suffix for p in tables} == {".csv", ".tex", ".md", ".html"}
    for table in tables:
        assert table.read_bytes() == (second / "tables" / table.name).read_bytes(), table.name


def _failed_run(tmp_path: Path, cfg: dict) -> str:
    """Run the workflow on ``cfg``, check it fails without a Python traceback, return stderr."""
    path = tmp_path / "config.yaml"
    path.write_text(yaml.safe_dump(cfg))
    done = _snakemake(tmp_path, path)
    assert done.returncode != 0
    assert "Traceback" not in done.stderr
    return done.stderr


def test_workflow_stops_on_bad_rows_naming_file_column_and_row(tmp_path, tiny_market):
    bad = tmp_path / "trades.csv"
    bad.write_text("sym,when,px,qty\nAAA,2021-01-04 10:00:00,10.0,100\nAAA,2021-01-04 10:00:01,ten,100\n")
    cfg = _config(tiny_market)
    cfg["inputs"]["trades"] = str(bad)
    cfg["inputs"]["quotes"] = None
    for name in ("effective_spread", "quoted_spread", "realized_spread", "price_impact", "closing_spread",
                 "kyle_lambda"):  # these need quotes
        cfg["measures"].pop(name, None)
    del cfg["models"]["validation"]
    cfg["columns"] = {"trades": {"sym": "security", "when": "ts", "px": "price", "qty": "size"}}
    stderr = _failed_run(tmp_path, cfg)
    assert "trades.csv: column 'px' (price), data row 2 (line 3 of the CSV) of the trades has 'ten'" in stderr


def test_workflow_stops_on_an_unknown_key_naming_it(tmp_path, tiny_market):
    cfg = _config(tiny_market)
    cfg["measurs"] = {}
    assert "unknown key 'measurs'" in _failed_run(tmp_path, cfg)
