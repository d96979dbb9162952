"""The table check: identical runs pass, a cell beyond tolerance fails and is
named, missing and added tables, rows and columns are reported.

The tolerance rule |candidate - reference| <= abs_tol + rel_tol * |reference|
is checked against numpy.isclose (reference library), which documents the
same rule with ``b`` the reference.
"""

import json
import shutil
from pathlib import Path

import numpy as np
import polars as pl
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from liqpanel.cli import main
from liqpanel.report.compare import Tolerance, check_table, check_tables, row_key, summary_text, write_check_report
from liqpanel.core.errors import InputError

# Invented tables in the layouts the report stage writes.
SUMMARY = pl.DataFrame(
    {
        "measure": ["roll_spread", "roll_efficient_var", "amihud"],
        "n": [677, 956, 956],
        "mean": [0.01780687446844115, 0.00045140144739192595, 1.4435622995728385],
        "sd": [0.009901926562655664, 0.0004655940767431754, 3.4826374097400294],
    }
)
LONG = pl.DataFrame(
    {
        "model": ["m1", "m1", "m2", "m2"],
        "variable": ["intercept", "roll_spread", "intercept", "roll_spread"],
        "coef": [0.0055, 0.4876, 0.1409, -0.4782],
        "tstat": [0.69, 1.96, 1.02, -0.87],
    }
)
PRINTED = pl.DataFrame(
    {
        "variable": ["roll_spread", "", "intercept", "", "N"],
        "m1": ["0.488", "(1.962)", "0.006", "(0.687)", "647"],
        "m2": ["-0.478", "(-0.871)", "0.141", "(1.024)", "307"],
    }
)


def _folder(root: Path, tables: dict[str, pl.DataFrame]) -> Path:
    (root / "tables").mkdir(parents=True)
    for name, frame in tables.items():
        frame.write_csv(root / "tables" / f"{name}.csv")
    return root


@pytest.fixture
def run_pair(tmp_path):
    tables = {"measures_summary": SUMMARY, "regressions": LONG, "regressions_printed": PRINTED}
    return _folder(tmp_path / "a", tables), _folder(tmp_path / "b", tables)


def _set_cell(folder: Path, table: str, row: int, column: str, value) -> None:
    path = folder / "tables" / f"{table}.csv"
    frame = pl.read_csv(path, infer_schema=False)
    values = frame.get_column(column).to_list()
    values[row] = str(value)
    frame.with_columns(pl.Series(column, values)).write_csv(path)


def test_identical_runs_pass_with_every_table_equal(run_pair):
    result = check_tables(*run_pair)
    assert result.passed
    assert result.counts() == {"equal": 3, "within_tolerance": 0, "different": 0, "missing": 0, "added": 0}
    assert result.deviations.height == 0
    assert sum(t.cells_compared for t in result.tables) == 3 * 3 + 4 * 2 + 5 * 2


def test_a_cell_beyond_tolerance_fails_and_is_named(run_pair):
    a, b = run_pair
    _set_cell(b, "regressions", 3, "coef", -0.4783)  # m2 roll_spread, 1e-4 off
    result = check_tables(a, b)
    assert not result.passed
    table = {t.name: t for t in result.tables}["regressions"]
    assert (table.status, table.cells_different, table.key) == ("different", 1, ["model", "variable"])
    worst = result.deviations.row(0, named=True)
    assert (worst["table"], worst["row"], worst["column"]) == ("regressions", "model=m2, variable=roll_spread", "coef")
    assert worst["abs_diff"] == pytest.approx(1e-4, rel=1e-9)
    assert worst["rel_diff"] == pytest.approx(1e-4 / 0.4782, rel=1e-9)
    text = summary_text(result)
    assert "regressions | model=m2, variable=roll_spread | coef" in text and "FAIL" in text


def test_a_perturbation_within_tolerance_passes_and_is_reported(run_pair):
    a, b = run_pair
    _set_cell(b, "measures_summary", 2, "mean", 1.4435622995728385 * (1 + 1e-9))
    result = check_tables(a, b)
    assert result.passed
    assert result.counts()["within_tolerance"] == 1
    row = result.deviations.row(0, named=True)
    assert (row["row"], row["column"], row["status"]) == ("measure=amihud", "mean", "within_tolerance")
    # the same change fails once the tolerance is tighter than the change
    assert not check_tables(a, b, Tolerance(abs_tol=0.0, rel_tol=1e-12)).passed


def test_missing_table_fails_and_added_table_passes_unless_strict(run_pair):
    a, b = run_pair
    (b / "tables" / "regressions.csv").unlink()
    shutil.copy(b / "tables" / "measures_summary.csv", b / "tables" / "sorts.csv")
    result = check_tables(a, b)
    status = {t.name: t.status for t in result.tables}
    assert status["regressions"] == "missing" and status["sorts"] == "added"
    assert not result.passed
    shutil.copy(a / "tables" / "regressions.csv", b / "tables" / "regressions.csv")
    assert check_tables(a, b).passed
    assert not check_tables(a, b, strict=True).passed


def test_missing_and_added_rows_and_columns_are_named(tmp_path):
    a = _folder(tmp_path / "a", {"measures_summary": SUMMARY})
    b = _folder(
        tmp_path / "b",
        {"measures_summary": pl.concat([SUMMARY.slice(1), SUMMARY.slice(0, 1).with_columns(measure=pl.lit("edge"))])
         .rename({"sd": "std"})},
    )
    check = check_tables(a, b).tables[0]
    assert check.status == "different"
    assert check.rows_missing == ["measure=roll_spread"] and check.rows_added == ["measure=edge"]
    assert check.columns_missing == ["sd"] and check.columns_added == ["std"]
    assert check.cells_compared == 2 * 2 and check.cells_different == 0


def test_printed_numbers_compare_as_numbers_and_repeated_labels_match_in_order():
    cand = PRINTED.with_columns(pl.Series("m2", ["-0.478", "(-0.872)", "0.141", "(1.024)", "307"]))
    assert row_key(PRINTED) == ["variable"]
    check, deviating = check_table("regressions_printed", PRINTED, cand, Tolerance(abs_tol=0.0015, rel_tol=0.0))
    assert check.status == "within_tolerance"
    assert deviating.row(0, named=True)["row"] == "variable= (row 2)"
    check, deviating = check_table("regressions_printed", PRINTED, cand, Tolerance(abs_tol=0.0, rel_tol=0.0))
    assert check.status == "different"
    assert (deviating.row(0, named=True)["abs_diff"]) == pytest.approx(0.001)


def test_text_against_empty_cell_differs():
    cand = PRINTED.with_columns(pl.Series("m1", ["0.488", "(1.962)", "", "(0.687)", "647"]))
    check, deviating = check_table("t", PRINTED, cand, Tolerance())
    assert check.status == "different"
    row = deviating.row(0, named=True)
    assert (row["row"], row["column"], row["reference"], row["candidate"]) == ("variable=intercept", "m1", "0.006", "")


def test_rows_without_labels_are_matched_by_position():
    ref = pl.DataFrame({"x": [0.5, 0.25, 0.125], "y": [1.0, 2.0, 3.0]})
    cand = ref.with_columns(pl.Series("y", [1.0, 2.5, 3.0]))
    assert row_key(ref) == []
    check, deviating = check_table("t", ref, cand, Tolerance())
    assert check.status == "different"
    assert deviating.select("row", "column").row(0) == ("row 2", "y")


def test_report_json_and_command_exit_status(run_pair, tmp_path, capsys):
    a, b = run_pair
    assert main(["check-tables", str(a), str(b), "--report", str(tmp_path / "same.json")]) == 0
    _set_cell(b, "measures_summary", 0, "sd", "NaN")
    report = tmp_path / "differ.json"
    assert main(["check-tables", str(a), str(b), "--report", str(report)]) == 1
    data = json.loads(report.read_text())
    assert data["passed"] is False and data["counts"]["different"] == 1
    assert data["deviations"][0]["table"] == "measures_summary" and data["deviations"][0]["column"] == "sd"
    out = capsys.readouterr().out
    assert "measures_summary" in out and "DIFFERENT" in out


def test_a_folder_of_archived_tables_works_like_a_run_folder(run_pair, tmp_path):
    a, b = run_pair
    archive = tmp_path / "archive"
    shutil.copytree(a / "tables", archive)
    result = check_tables(archive, b)
    assert result.passed and len(result.tables) == 3


def test_a_folder_without_tables_is_a_clear_error(tmp_path, capsys):
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError, match="no tables here"):
        check_tables(tmp_path / "empty", tmp_path / "empty")
    assert main(["check-tables", str(tmp_path / "empty"), str(tmp_path / "nope")]) == 2
    assert "liqpanel:" in capsys.readouterr().err


def test_json_report_has_no_infinities(run_pair, tmp_path):
    a, b = run_pair
    _set_cell(b, "regressions", 0, "model", "m9")  # a key changes: row missing and row added
    _set_cell(b, "measures_summary", 0, "measure", "other")
    _set_cell(b, "regressions_printed", 0, "m1", "n/a")  # text against a number
    path = write_check_report(check_tables(a, b), tmp_path / "r.json")
    text = path.read_text()
    assert "Infinity" not in text and "NaN" not in text
    assert json.loads(text)["deviations"][0]["candidate"] == "n/a"


finite = st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, allow_infinity=False)


@settings(max_examples=200, deadline=None)
@given(ref=finite, step=st.floats(min_value=-1e-3, max_value=1e-3), abs_tol=st.sampled_from([0.0, 1e-9, 1e-4]),
       rel_tol=st.sampled_from([0.0, 1e-6, 1e-3]))
def test_tolerance_rule_matches_numpy_isclose(ref, step, abs_tol, rel_tol):
    cand = ref + step * max(1.0, abs(ref))
    table_ref = pl.DataFrame({"name": ["a"], "value": [repr(ref)]})
    table_cand = pl.DataFrame({"name": ["a"], "value": [repr(cand)]})
    check, _ = check_table("t", table_ref, table_cand, Tolerance(abs_tol, rel_tol))
    agrees = check.status in ("equal", "within_tolerance")
    assert agrees == bool(np.isclose(cand, ref, rtol=rel_tol, atol=abs_tol))
