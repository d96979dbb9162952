"""The command line: version, module entry point, help text, closed pipes, quiet runs, version checks."""

import io
import json
import subprocess
import sys

import pytest

import liqpanel
from liqpanel.cli import main, parser
from liqpanel.cli.environment import compare_versions, installed_versions, manifest_versions, versions_text
from liqpanel.core.errors import InputError
from liqpanel.cli.progress import follow


def test_version_is_printed_by_both_entry_points():
    for cmd in ([sys.executable, "-m", "liqpanel", "--version"],):
        done = subprocess.run(cmd, capture_output=True, text=True, timeout=60)
        assert done.returncode == 0
        assert done.stdout.strip() == f"liqpanel {liqpanel.__version__}"
    with pytest.raises(SystemExit) as stop:
        main(["--version"])
    assert stop.value.code == 0


def _subparsers(top):
    return next(a for a in top._actions if a.__class__.__name__ == "_SubParsersAction").choices


def test_every_option_of_every_command_has_help_text():
    top = parser()
    missing = [
        f"{name} {'/'.join(action.option_strings) or action.dest}"
        for name, sub in _subparsers(top).items()
        for action in sub._actions
        if not action.help
    ]
    assert missing == []
    assert len(_subparsers(top)) >= 7


def test_a_closed_pipe_ends_quietly():
    # `liqpanel measures -v | true`: the reader goes away before the listing is written
    done = subprocess.run(
        f"{sys.executable} -m liqpanel measures -v | true", shell=True, capture_output=True, text=True, timeout=60,
    )
    assert "Traceback" not in done.stderr
    assert "BrokenPipe" not in done.stderr


ENGINE_OUTPUT = """Building DAG of jobs...
Job stats:
job        count
-------  -------
all            1
clean          2
report         1
total          4

[Fri Dec  4 15:00:00 2026]
localrule clean:
    input: demo_data/trades.parquet
    jobid: 3
1 of 4 steps (25%) done
[Fri Dec  4 15:00:01 2026]
localrule clean:
    jobid: 2
2 of 4 steps (50%) done
localrule report:
    jobid: 1
3 of 4 steps (75%) done
localrule all:
4 of 4 steps (100%) done
Complete log: .snakemake/log/2026-12-04T150000.snakemake.log
"""


def test_quiet_run_prints_one_line_per_stage():
    out = io.StringIO()
    seen = follow(io.StringIO(ENGINE_OUTPUT), out)
    assert seen["stages"] == ["clean", "report"]
    assert (seen["done"], seen["total"], seen["failed"]) == (4, 4, False)
    assert out.getvalue().splitlines() == ["  clean", "  report  (2 of 4 jobs done)", "  4 of 4 jobs done"]


def test_a_failing_job_shows_everything_from_the_error_on():
    failing = ENGINE_OUTPUT.split("localrule report:")[0] + (
        "Error in rule report:\n    jobid: 1\nliqpanel: inputs changed\n"
        "Exiting because a job execution failed. Look below for error messages\n"
        "Complete log: .snakemake/log/x.log\n"
    )
    out = io.StringIO()
    seen = follow(io.StringIO(failing), out)
    text = out.getvalue()
    assert seen["failed"]
    assert "Error in rule report:" in text and "liqpanel: inputs changed" in text
    assert text.endswith("full log of the run: .snakemake/log/x.log\n")
    assert "jobid: 3" not in text  # the job blocks before the failure stay in the log


def test_an_error_of_ours_leaves_the_engine_block_out_but_gives_the_log():
    failing = ENGINE_OUTPUT.split("localrule report:")[0] + (
        "Error in rule report:\n    jobid: 1\nliqpanel: a message of a job\n"
        "Exiting because a job execution failed. Look below for error messages\n"
        "Complete log(s): .snakemake/log/x.log\n"  # Snakemake 9's wording
    )
    for ours, shown in ((True, False), (False, True)):
        out = io.StringIO()
        seen = follow(io.StringIO(failing), out, explained=lambda: ours)
        text = out.getvalue()
        assert seen["failed"] and ("Error in rule report:" in text) is shown
        assert "liqpanel: a message of a job" in text
        assert text.endswith("full log of the run: .snakemake/log/x.log\n")


def test_versions_that_differ_from_a_manifest_are_named(tmp_path):
    here = installed_versions()
    manifest = {
        "versions": {"python": "3.0.1", "polars": here["polars"]},
        "environment": {"polars": here["polars"], "NumPy": "0.0.1", "not_a_real_dist": "1.0"},
    }
    (tmp_path / "manifest.json").write_text(json.dumps(manifest))
    differences = compare_versions(manifest_versions(tmp_path), here)
    by_name = {d.package: d for d in differences}
    assert sorted(by_name) == ["not-a-real-dist", "numpy", "polars", "python"]
    assert not by_name["polars"].differs
    assert by_name["numpy"].recorded == "0.0.1" and by_name["numpy"].installed == here["numpy"]
    assert by_name["not-a-real-dist"].installed is None
    assert by_name["python"].installed == sys.version.split()[0]
    text = versions_text(differences, tmp_path)
    assert "3 of 4 packages differ" in text and "polars" not in text
    assert main(["check-versions", str(tmp_path)]) == 1


def test_version_check_of_a_missing_manifest_says_what_to_give(tmp_path):
    with pytest.raises(InputError, match="manifest.json does not exist"):
        manifest_versions(tmp_path)


def test_check_tables_writes_no_report_unless_asked(tmp_path, monkeypatch):
    ref, cand = tmp_path / "ref", tmp_path / "cand"
    for folder in (ref, cand):
        folder.mkdir()
        (folder / "t.csv").write_text("a,b\n1,2.5\n")
    monkeypatch.chdir(tmp_path)
    assert main(["check-tables", str(ref), str(cand)]) == 0
    assert list(tmp_path.glob("*.json")) == []
    assert main(["check-tables", str(ref), str(cand), "--report", str(tmp_path / "check.json")]) == 0
    assert json.loads((tmp_path / "check.json").read_text())
