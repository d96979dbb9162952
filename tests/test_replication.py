"""A referee's view, end to end: interrupted runs, the manifest, the HTML
report, and the demo's tables against the committed ones in tests/expected.

Checksums are checked against hashlib (standard library).
"""

import hashlib
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import polars as pl
import pytest
import yaml
from test_workflow import _config, _run, _snakemake

from liqpanel.report.compare import check_tables, summary_text
from liqpanel.report import canonical_json
from liqpanel.simulate import SimulationSpec, simulate_market, write_market

REPO = Path(__file__).resolve().parents[1]
EXPECTED = REPO / "tests" / "expected"

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def market(tmp_path_factory):
    data = tmp_path_factory.mktemp("market")
    write_market(simulate_market(SimulationSpec(n_securities=12, n_months=8, seed=11, bad_row_share=0.01)), data)
    return data


@pytest.fixture(scope="module")
def whole_run(tmp_path_factory, market):
    return _run(tmp_path_factory.mktemp("whole"), market)


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _html_report(workdir: Path, report: Path) -> Path:
    """Snakemake's HTML report of the run made in ``workdir`` (config.yaml there)."""
    made = subprocess.run(
        [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--configfile", "config.yaml",
         "--report", str(report), "--", "all"],
        cwd=workdir, capture_output=True, text=True, timeout=600,
    )
    assert made.returncode == 0, made.stderr[-4000:]
    return report


def test_a_killed_run_resumes_to_the_same_tables(tmp_path, market, whole_run):
    (tmp_path / "config.yaml").write_text(yaml.safe_dump(_config(market)))
    command = [sys.executable, "-m", "liqpanel.cli", "run", "--config", "config.yaml", "--cores", "2"]
    run = subprocess.Popen(command, cwd=tmp_path, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True)
    deadline = time.monotonic() + 300
    while not (tmp_path / "work" / "monthly.parquet").exists():  # the measures stage is done
        assert run.poll() is None, "the run ended before it could be interrupted"
        assert time.monotonic() < deadline
        time.sleep(0.01)
    os.killpg(run.pid, signal.SIGKILL)
    run.wait()

    assert not (tmp_path / "results" / whole_run.name).exists()  # killed before the report
    assert any((tmp_path / ".snakemake" / "locks").iterdir())  # and it left Snakemake's lock behind
    for part in (tmp_path / "work").rglob("*.parquet"):  # nothing half-written under a final name
        pl.read_parquet(part)
    (tmp_path / "work" / ".panel.parquet.killed.part").write_bytes(b"half a file")  # as a kill mid-write leaves

    resumed = subprocess.run(command, cwd=tmp_path, capture_output=True, text=True, timeout=600)
    assert resumed.returncode == 0, resumed.stderr[-4000:]
    assert "removed the lock left by an interrupted run" in resumed.stderr
    assert not list((tmp_path / "work").rglob("*.part"))
    folder = (tmp_path / "results" / "latest").resolve()
    assert folder.name == whole_run.name
    csvs = sorted(p.name for p in (whole_run / "tables").glob("*.csv"))
    assert csvs == sorted(p.name for p in (folder / "tables").glob("*.csv")) and len(csvs) >= 4
    for name in csvs:
        assert (folder / "tables" / name).read_bytes() == (whole_run / "tables" / name).read_bytes(), name
    result = check_tables(whole_run, folder)
    assert result.passed and result.counts()["equal"] == len(csvs), summary_text(result)

    # Snakemake's HTML report of the resumed run: every table and figure with its caption
    html = _html_report(tmp_path, tmp_path / "report.html").read_text()
    manifest = json.loads((folder / "manifest.json").read_text())
    for kind in ("tables", "figures"):
        for name, entry in manifest[kind].items():
            assert json.dumps({"name": name, "caption": entry["caption"]})[1:-1] in html, name


def test_manifest_lists_every_file_with_its_checksum(whole_run, market):
    manifest = json.loads((whole_run / "manifest.json").read_text())
    on_disk = {
        str(p.relative_to(whole_run)) for p in whole_run.rglob("*")
        if p.is_file() and p.name not in ("manifest.json", ".snakemake_timestamp")
    }
    listed = {o["path"]: o for o in manifest["outputs"]}
    assert set(listed) == on_disk
    assert {"README.md", "config.yaml", "inputs.sha256", "tables/regressions.tex", "figures/spread_median.pdf"} <= on_disk
    for path, entry in listed.items():
        assert entry["sha256"] == _sha(whole_run / path), path
        assert entry["bytes"] == (whole_run / path).stat().st_size
    assert listed["data/monthly.parquet"]["rows"] == pl.read_parquet(whole_run / "data" / "monthly.parquet").height
    for entry in manifest["inputs"]:
        assert entry["sha256"] == _sha(Path(entry["path"]) if Path(entry["path"]).is_absolute() else REPO / entry["path"])
    assert {e["path"] for e in manifest["inputs"]} >= {str(market / "trades.parquet"), str(market / "returns.parquet")}
    # the identity recorded is exactly what the run-id hashes
    assert hashlib.sha256(canonical_json(manifest["identity"]).encode()).hexdigest()[:12] == whole_run.name
    assert manifest["started"] <= manifest["finished"] and manifest["elapsed_seconds"] >= 0
    assert "snakemake" in manifest["command"] and manifest["git"]["dirty"] in (True, False)
    readme = (whole_run / "README.md").read_text()
    assert _sha(market / "trades.parquet") in readme and f"liqpanel check-tables archive/{whole_run.name}" in readme
    checksums = (whole_run / "inputs.sha256").read_text().splitlines()
    assert f"{_sha(market / 'returns.parquet')}  {market / 'returns.parquet'}" in checksums


def test_demo_tables_match_the_committed_expected_tables(tmp_path):
    (tmp_path / "demo_data").symlink_to(REPO / "demo_data")
    done = _snakemake(tmp_path, REPO / "config" / "config.yaml")
    assert done.returncode == 0, done.stderr[-4000:]
    result = check_tables(EXPECTED, tmp_path / "results" / "latest")
    assert result.passed, summary_text(result)
    assert result.counts()["missing"] == 0 and len(list(EXPECTED.glob("*.csv"))) >= 4


def test_html_report_shows_each_formatted_table_in_a_browser(tmp_path, whole_run):
    """Snakemake's HTML report, opened in headless Chromium: choosing a table shows it as printed.

    For every table the report lists, its view button is clicked; the page
    the report then shows (in a frame) is opened on its own and its rendered
    text (``innerText``) must hold the caption, the formatted cells of the
    Markdown version and the notes. CI installs Chromium (.ci/run).
    """
    import base64
    import urllib.parse

    from browser import Browser, chromium

    if chromium() is None:
        if os.environ.get("CI"):
            pytest.fail("CI must install Chromium (apt-get install chromium) for the HTML report check")
        pytest.skip("Chromium is not installed")
    report = _html_report(whole_run.parents[1], tmp_path / "report.html")
    manifest = json.loads((whole_run / "manifest.json").read_text())
    browser = Browser(tmp_path / "profile")
    try:
        browser.open(report.as_uri())
        browser.wait_for("document.querySelector('nav li') !== null")
        click_tables = ("(() => { const a = Array.from(document.querySelectorAll('nav a'))"
                        ".find(a => a.textContent.trim() === 'Tables'); if (a) a.click(); return !!a; })()")
        assert browser.evaluate(click_tables)
        listed = browser.wait_for("Array.from(document.querySelectorAll('tr td:first-child')).map(td => td.textContent)")
        assert sorted(listed) == sorted(manifest["tables"])
        shown = {}
        for name in sorted(manifest["tables"]):
            browser.evaluate(click_tables)
            browser.wait_for("document.querySelectorAll('tr').length > 1")
            assert browser.evaluate(
                f"Array.from(document.querySelectorAll('tr')).find(r => r.cells[0] && r.cells[0].textContent === "
                f"{json.dumps(name)}).querySelector('a[iconname=eye]').click() || true"
            )
            shown[name] = browser.wait_for("document.querySelector('iframe') && document.querySelector('iframe').src")
        pages = {}
        for name, uri in shown.items():  # the framed page, decoded from its data URI and opened on its own
            head, data = uri.split(",", 1)
            page = tmp_path / f"{name}.html"
            page.write_bytes(base64.b64decode(data) if head.endswith(";base64") else urllib.parse.unquote(data).encode())
            browser.open(page.as_uri())
            pages[name] = browser.wait_for("document.body && document.body.innerText")
    finally:
        browser.close()
    for name, text in pages.items():
        entry = manifest["tables"][name]
        assert entry["caption"] in text, name
        assert entry["notes"] in text, name
        md = (whole_run / "tables" / f"{name}.md").read_text().splitlines()
        rows = [line for line in md if line.startswith("| ") and not line.startswith("|---")]
        first_row = rows[1] if len(rows) > 1 else rows[0]  # the first body row of the pipe table (a table
        # with no row, e.g. a factor the tiny market has too few months for, shows its header)
        cells = [c.strip() for c in first_row.strip("|").split("|")]
        assert "\t".join(c for c in cells) in text.replace(" \t", "\t"), (name, cells)
    # the regressions as printed: t-statistics in parentheses, whole-number counts
    assert "(" in pages["regressions"] and "\nN\t" in pages["regressions"]
