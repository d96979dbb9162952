"""Run identity, publication tables, manifest, figures and restart safety.

Checksums are checked against hashlib (standard library), PNG metadata with
Pillow (matplotlib's image library); the rest are properties of our own
formats, stated beside each check.
"""

import hashlib
import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import polars as pl
import pytest
import yaml

from liqpanel.report import figures
from liqpanel import report as rep
from liqpanel.core import runtime
from liqpanel.config import validate_config
from liqpanel.core.errors import ConfigError, InputError
from liqpanel.core.io import write_parquet
from tests.demo_config import one_market

REPO = Path(__file__).resolve().parents[1]


def _inputs(folder: Path) -> Path:
    folder.mkdir(parents=True)
    pl.DataFrame({"security": ["AQX", "BRZ"], "month": ["2021-01", "2021-01"], "ret": [0.01, -0.02]}).write_parquet(
        folder / "returns.parquet"
    )
    pl.DataFrame({"security": ["AQX"], "date": ["2021-01-29"], "log_size": [3.5]}).write_parquet(folder / "chars.parquet")
    for day in ("01", "02"):
        (folder / f"daily_{day}.csv").write_text(f"security,date,close\nAQX,2021-01-{day},10.0\n")
    return folder


def _config(folder: Path, **run) -> dict:
    raw = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    raw["inputs"] = {
        "daily": str(folder / "daily_*.csv"),
        "returns": str(folder / "returns.parquet"),
        "characteristics": [
            {"name": "chars", "path": str(folder / "chars.parquet"), "variables": ["log_size"], "lag_months": 0}
        ],
    }
    raw.setdefault("run", {}).update(run)
    return validate_config(one_market(raw))


# ---------------------------------------------------------------- run identity

def test_run_id_ignores_where_inputs_and_outputs_live(tmp_path):
    a, b = _inputs(tmp_path / "here"), _inputs(tmp_path / "there" / "deeper")
    first = rep.run_id(_config(a), use_cache=False)
    assert re.fullmatch(r"[0-9a-f]{12}", first)
    assert rep.run_id(_config(b, results_dir="elsewhere", work_dir="scratch"), use_cache=False) == first


def test_run_id_changes_with_contents_settings_and_version(tmp_path):
    a = _inputs(tmp_path / "a")
    base = rep.run_id(_config(a), use_cache=False)
    changed = _config(a)
    changed["measures"]["roll_spread"]["min_days"] = 10
    assert rep.run_id(changed, use_cache=False) != base
    assert rep.run_id(_config(a), version="9.9.9", use_cache=False) != base
    assert rep.run_id(_config(a, engine_threads=3), use_cache=False) != base
    (a / "daily_02.csv").write_text("security,date,close\nAQX,2021-01-02,10.5\n")  # one matched file of the glob
    assert rep.run_id(_config(a), use_cache=False) != base


def test_identity_replaces_every_input_path_by_its_checksum(tmp_path):
    a = _inputs(tmp_path / "a")
    ident = rep.run_identity(_config(a), use_cache=False)
    text = json.dumps(ident)
    assert str(a) not in text and "results_dir" not in text and "work_dir" not in text
    sha = hashlib.sha256((a / "returns.parquet").read_bytes()).hexdigest()  # hashlib: reference
    assert ident["config"]["inputs"]["returns"] == {"sha256": sha}
    daily = [hashlib.sha256((a / f"daily_{d}.csv").read_bytes()).hexdigest() for d in ("01", "02")]
    assert ident["config"]["inputs"]["daily"] == {"sha256": daily}  # a glob: its matches in name order
    market = hashlib.sha256((REPO / "src" / "liqpanel" / "market_profiles" / "demo.yaml").read_bytes()).hexdigest()
    assert ident["config"]["market"] == {"sha256": market}


def test_input_keys_are_found_generically(tmp_path):
    a = _inputs(tmp_path / "a")
    cfg = _config(a)
    cfg["inputs"]["adjustments"] = str(a / "returns.parquet")  # a key added by a later stage
    roles = [role for role, _ in rep.input_entries(cfg)]
    assert "inputs.adjustments" in roles and "inputs.characteristics[0].path" in roles and "market" in roles
    cfg["inputs"]["adjustments"] = str(a / "missing.parquet")
    with pytest.raises(InputError, match="missing.parquet"):
        rep.run_id(cfg, use_cache=False)


def test_checksum_cache_is_refreshed_when_a_file_changes(tmp_path):
    f = tmp_path / "x.csv"
    f.write_text("a\n1\n")
    cache: dict = {}
    first = rep.input_checksum(str(f), cache)
    assert cache[os.path.realpath(f)]["sha256"] == first == hashlib.sha256(b"a\n1\n").hexdigest()
    f.write_text("a\n22\n")
    assert rep.input_checksum(str(f), cache) == hashlib.sha256(b"a\n22\n").hexdigest()


def test_changed_inputs_stop_the_report(tmp_path):
    a = _inputs(tmp_path / "a")
    cfg = _config(a)
    rid = rep.run_id(cfg, use_cache=False)
    assert rep.check_identity(cfg, rid)["version"]
    (a / "returns.parquet").write_bytes(b"changed")
    with pytest.raises(InputError, match="inputs changed while the workflow ran"):
        rep.check_identity(cfg, rid)


# ---------------------------------------------------------------- tables

def test_csv_keeps_full_precision(tmp_path):
    values = [0.1 + 0.2, 1 / 3, 2.0**-40, -123456.78901234567]
    frame = pl.DataFrame({"name": ["a", "b", "c", "d"], "value": values})
    rep.write_table(frame, tmp_path / "t", caption="c", label="tab:t")
    assert pl.read_csv(tmp_path / "t.csv").get_column("value").to_list() == values  # exact round trip


def test_latex_aligns_decimals_and_has_booktabs_caption_label_notes():
    frame = pl.DataFrame(
        {"variable": ["roll_spread", "", "N"], "m1": ["0.488", "(1.962)", "647"], "m2": ["-0.478", "(-0.871)", "307"]}
    )
    tex = rep.to_latex(frame, caption="Regressions of 100% returns", label="tab:reg", notes="Sample: two firms_x.")
    assert r"\begin{tabular}{lr@{}lr@{}l}" in tex
    assert [tex.count(r) for r in (r"\toprule", r"\midrule", r"\bottomrule")] == [1, 1, 1]
    assert r"\caption{Regressions of 100\% returns}" in tex and r"\label{tab:reg}" in tex
    assert r"\textit{Notes:} Sample: two firms\_x." in tex
    body = tex.split(r"\midrule")[1].split(r"\bottomrule")[0].strip().splitlines()
    # every row has 5 cells for 5 LaTeX columns; the integer part sits left of the point
    assert all(line.count(" & ") == 4 for line in body)
    assert body[0] == r"roll\_spread & 0 & .488 & $-$0 & .478 \\"
    assert body[1] == r" & (1 & .962) & ($-$0 & .871) \\"
    assert body[2] == r"N & 647 &  & 307 &  \\"


def test_numbers_keep_three_significant_digits_when_small():
    assert rep.format_number(0.0004655940767431754, 4) == "0.000466"
    assert rep.format_number(1.4435622995728385, 4) == "1.4436"
    assert rep.format_number(0.0, 4) == "0.0000"
    assert rep.format_number(-2.5e-12, 4) == "-2.50e-12"
    assert rep.number_in_text("(-0.871)") == -0.871 and rep.number_in_text("0.05**") == 0.05
    assert rep.number_in_text("roll_spread") is None and rep.number_in_text("2021-01-01") is None


def test_run_folder_takes_caption_label_and_notes_from_config(tmp_path):
    out = rep.RunFolder(
        tmp_path, rid="abc", sample="Sample: 2 securities",
        captions={"summary": {"caption": "Table 2: liquidity", "label": "tab:liq", "notes": "Winsorised at 1%"}},
    )
    out.table("summary", pl.DataFrame({"measure": ["x"], "mean": [0.5]}), caption="built-in", notes="Source: ours")
    md = (tmp_path / "tables" / "summary.md").read_text()
    assert md.startswith("**Table 2: liquidity**")
    assert md.rstrip().endswith("*Notes:* Source: ours. Winsorised at 1%. Sample: 2 securities.")
    assert r"\label{tab:liq}" in (tmp_path / "tables" / "summary.tex").read_text()
    (tmp_path / "tables" / "other.csv").write_text("a\n1\n")  # a table written without RunFolder is listed too
    contents = out.contents()
    assert contents["tables"]["summary"]["caption"] == "Table 2: liquidity"
    assert contents["tables"]["other"]["caption"] == "other"


def test_standard_errors_note_names_the_estimator_and_lags():
    note = rep.standard_errors_note(
        [
            {"name": "a", "regressors": ["x"], "estimator": "fama_macbeth", "lags": 4},
            {"name": "b", "regressors": ["x"], "estimator": "pooled", "cluster": ["security", "month"]},
        ]
    )
    assert note.startswith("t-statistics in parentheses.")
    assert "a: Fama-MacBeth (1973) regressions with Newey-West (1987) standard errors of the average slope, 4 lags" in note
    assert "b: pooled OLS with standard errors clustered by security and month" in note


# ---------------------------------------------------------------- manifest, figures

def test_manifest_lists_every_output_with_its_checksum(tmp_path):
    a = _inputs(tmp_path / "in")
    cfg = _config(a)
    run = tmp_path / "run"
    rep.write_table(pl.DataFrame({"k": ["x"], "v": [1.5]}), run / "tables" / "t", caption="c", label="l")
    write_parquet(pl.DataFrame({"v": [1, 2, 3]}), run / "data" / "d.parquet")
    rep.write_manifest(run, config=cfg, inputs=rep.input_listing(cfg), rid="r1", started=rep.now(), command="x")
    manifest = json.loads((run / "manifest.json").read_text())
    on_disk = {str(p.relative_to(run)) for p in run.rglob("*") if p.is_file() and p.name != "manifest.json"}
    listed = {o["path"]: o for o in manifest["outputs"]}
    assert set(listed) == on_disk
    for path, entry in listed.items():
        assert entry["sha256"] == hashlib.sha256((run / path).read_bytes()).hexdigest()
    assert listed["data/d.parquet"]["rows"] == 3 and listed["tables/t.csv"]["rows"] == 1
    roles = {e["role"] for e in manifest["inputs"]}
    assert {"inputs.daily", "inputs.returns", "market"} <= roles
    assert manifest["versions"]["polars"] == pl.__version__ and "snakemake" in manifest["environment"]
    assert manifest["config"]["run"]["engine_threads"] == 4 and manifest["git"]["revision"]


def test_figures_carry_the_run_id_in_metadata_and_are_byte_stable(tmp_path):
    from PIL import Image

    series = {"spread": (["2021-01-01", "2021-02-01"], [1.0, 1.2])}
    paths = figures.line_chart(series, stem=tmp_path / "a" / "f", title="t", ylabel="spread (% of price)", rid="abc123")
    again = figures.line_chart(series, stem=tmp_path / "b" / "f", title="t", ylabel="spread (% of price)", rid="abc123")
    assert [p.read_bytes() for p in paths] == [p.read_bytes() for p in again]
    assert Image.open(paths[0]).text["Description"] == "liqpanel run abc123"
    assert b"liqpanel run abc123" in paths[1].read_bytes()
    assert b"CreationDate" not in paths[1].read_bytes()


# ---------------------------------------------------------------- restarts

def test_stale_lock_of_a_dead_process_is_removed(tmp_path):
    (tmp_path / runtime.LOCK_DIR).mkdir(parents=True)
    (tmp_path / runtime.LOCK_DIR / "0.output.lock").write_text("x")
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    runtime.claim_lock(tmp_path)
    owner = json.loads((tmp_path / runtime.OWNER_FILE).read_text())
    (tmp_path / runtime.OWNER_FILE).write_text(json.dumps({**owner, "pid": int(dead.stdout)}))
    assert runtime.clear_stale_lock(tmp_path) is True
    assert not any((tmp_path / runtime.LOCK_DIR).iterdir())


def test_partial_files_of_a_killed_run_are_tidied(tmp_path):
    (tmp_path / "work" / "month=2021-01").mkdir(parents=True)
    (tmp_path / "work" / "month=2021-01" / ".monthly.parquet.x1.part").write_bytes(b"half")
    (tmp_path / "work" / "month=2021-01" / "monthly.parquet").write_bytes(b"whole")
    assert runtime.remove_partial_files(tmp_path / "work", tmp_path / "absent") == 1
    assert [p.name for p in (tmp_path / "work").rglob("*") if p.is_file()] == ["monthly.parquet"]


def test_lock_of_a_live_process_is_kept(tmp_path):
    (tmp_path / runtime.LOCK_DIR).mkdir(parents=True)
    (tmp_path / runtime.LOCK_DIR / "0.output.lock").write_text("x")
    live = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(30)"])
    try:
        runtime.claim_lock(tmp_path)
        owner = json.loads((tmp_path / runtime.OWNER_FILE).read_text())
        (tmp_path / runtime.OWNER_FILE).write_text(json.dumps({**owner, "pid": live.pid}))
        assert runtime.clear_stale_lock(tmp_path) is False
        assert (tmp_path / runtime.LOCK_DIR / "0.output.lock").exists()
        (tmp_path / runtime.OWNER_FILE).write_text(json.dumps({**owner, "host": "another-machine", "pid": 1}))
        assert runtime.clear_stale_lock(tmp_path) is False
    finally:
        live.kill()
        live.wait()


def test_work_folder_made_with_other_engine_settings_is_refused(tmp_path):
    runtime.stamp_work_folder(tmp_path, 4)
    runtime.check_work_folder(tmp_path, 4)
    with pytest.raises(ConfigError, match="make clean-work"):
        runtime.check_work_folder(tmp_path, 8)


def test_engine_threads_cannot_change_once_polars_runs():
    size = pl.thread_pool_size()
    assert runtime.pin_engine_threads({"run": {"engine_threads": size}}) == size
    with pytest.raises(ConfigError, match="already started"):
        runtime.pin_engine_threads({"run": {"engine_threads": size + 1}})
    assert runtime.pin_engine_threads({"run": {"engine_threads": "many"}}) is None


def test_run_folder_is_published_whole(tmp_path):
    build = rep.build_folder(tmp_path, "abc")
    (build / "tables").mkdir()
    (build / "tables" / "t.csv").write_text("a\n1\n")
    leftover = tmp_path / ".abc.building-999999"
    leftover.mkdir()
    again = rep.build_folder(tmp_path, "abc")  # builds left by killed runs are swept away
    assert not leftover.exists() and not (build / "tables").exists() and list(again.iterdir()) == []
    (again / "done").write_text("yes")
    rep.publish_folder(again, tmp_path / "abc")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["abc"]
    assert (tmp_path / "abc" / "done").read_text() == "yes"
    shutil.rmtree(tmp_path / "abc")
