"""The estimator study alone through its command, `liqpanel study`, on a tiny invented market."""

import json
import subprocess
import sys
from pathlib import Path

import polars as pl
import pytest
import yaml

from liqpanel.config import load_config
from liqpanel.report import run_id
from liqpanel.simulate import SimulationSpec, simulate_market, write_market
from tests.demo_config import one_market

REPO = Path(__file__).resolve().parents[1]

pytestmark = pytest.mark.slow


def test_study_command_writes_tables_heat_maps_and_summary(tmp_path):
    data = tmp_path / "market"
    write_market(simulate_market(SimulationSpec(n_securities=8, n_months=3, seed=21)), data)
    cfg = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    cfg["sample"] = {"start": "2021-01", "end": "2021-03"}
    cfg["inputs"] = {"trades": str(data / "trades.parquet")}
    cfg["study"] = {"draws": 300, "seed": 5, "bins": 2, "in_report": False}
    cfg = one_market(cfg)
    path = tmp_path / "config.yaml"
    path.write_text(yaml.safe_dump(cfg))
    done = subprocess.run(
        [sys.executable, "-m", "liqpanel.cli", "study", "--config", str(path), "--quiet", "rules"],
        cwd=tmp_path, capture_output=True, text=True, timeout=600,
    )
    assert done.returncode == 0, done.stderr[-4000:]
    config = load_config(path)
    folder = tmp_path / "results" / f"study-{run_id(config)}"
    assert f"study results: results/{folder.name}" in done.stdout and "lowest RMSE" in done.stdout
    estimators = pl.read_csv(folder / "tables" / "study_estimators.csv")
    assert estimators.get_column("n").unique().to_list() == [300]
    assert {"edge_spread", "cs_spread", "roll_spread", "gibbs_spread", "vol_yang_zhang"} <= set(estimators["estimator"])
    audit = dict(pl.read_csv(folder / "tables" / "study_calibration_audit.csv").iter_rows())
    assert audit["read"] == 24  # 8 securities x 3 months
    for kind in ("spread", "volatility"):
        for suffix in (".png", ".pdf"):
            assert (folder / "figures" / f"study_bias_{kind}{suffix}").stat().st_size > 0
    assert (folder / "study_summary.md").read_text().startswith("# Which estimator")
    manifest = json.loads((folder / "manifest.json").read_text())
    assert "tables/study_by_cell.csv" in {o["path"] for o in manifest["outputs"]}
    # the study alone does not build the panel or run the models
    assert not (tmp_path / "work" / "panel.parquet").exists()


def test_bad_study_setting_stops_before_running(tmp_path):
    cfg = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    cfg["study"]["volatility"] = "roll_spread"
    path = tmp_path / "config.yaml"
    path.write_text(yaml.safe_dump(cfg))
    done = subprocess.run([sys.executable, "-m", "liqpanel.cli", "study", "--config", str(path)],
                          cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert done.returncode == 2
    assert "study.volatility: 'roll_spread' is a measure of the spread family" in done.stderr
    assert "Traceback" not in done.stderr
