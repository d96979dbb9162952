"""The input contract (liqpanel.ingest): dates, months, numbers and missing tokens.

Date forms are those of ISO 8601 (YYYY-MM-DD, basic form YYYYMMDD, and
YYYY-MM for a calendar month) and of strftime directives (C standard,
common practice); a number is finite or not as IEEE 754 says.
"""

from datetime import date

import polars as pl
import pytest

from liqpanel import ingest
from liqpanel.core.errors import InputError
from liqpanel.panel import read_monthly_returns


def _read(tmp_path, text, spec, **fmt):
    path = tmp_path / "f.csv"
    path.write_text(text)
    return ingest.read_frame(ingest.layout_from("test", str(path), None, fmt), spec)[0]


DATES = ingest.Spec("test file", dates=("date",))
MONTHS = ingest.Spec("test file", months=("month",))


@pytest.mark.parametrize("written, expected", [
    ("2021-03-04", date(2021, 3, 4)),             # ISO 8601 extended form
    ("20210304", date(2021, 3, 4)),               # ISO 8601 basic form
    ("2021-03-04 16:00:00", date(2021, 3, 4)),    # a time after the date is ignored
    ("2021-03-04T16:00:00Z", date(2021, 3, 4)),
])
def test_dates_recognised_without_a_format(tmp_path, written, expected):
    frame = _read(tmp_path, f"security,date\nA,{written}\n", DATES)
    assert frame["date"].to_list() == [expected] and frame["_bad"].to_list() == [None]


@pytest.mark.parametrize("written", ["03/04/2021", "3.4.2021", "04-03-21", "2021-02-30", "20211304", "yesterday"])
def test_unrecognised_or_ambiguous_dates_are_flagged_not_guessed(tmp_path, written):
    frame = _read(tmp_path, f"security,date\nA,{written}\n", DATES)
    assert frame["date"].to_list() == [None] and frame.select("_bad", "_value").row(0) == ("date", written)


def test_ambiguous_dates_get_advice_to_set_a_format(tmp_path):
    path = tmp_path / "f.csv"
    path.write_text("security,date\nA,2021-01-04\nA,03/04/2021\n")
    layout = ingest.layout_from("daily", str(path), None, None)
    frame, files = ingest.read_frame(layout, DATES)
    message = str(ingest.first_bad(frame, layout, files))
    assert "data row 2" in message and "'03/04/2021'" in message and "`formats.daily`" in message


def test_integer_and_float_dates_are_yyyymmdd(tmp_path):
    path = tmp_path / "f.parquet"
    pl.DataFrame({"security": ["A", "B", "C"], "date": [20210304, 19991231, 57303]}).write_parquet(path)
    frame = ingest.read_frame(ingest.layout_from("t", str(path), None, None), DATES)[0]
    # 57303 is not a YYYYMMDD date; read as days since 1970 it would be 2126-11-21: refused instead
    assert frame["date"].to_list() == [date(2021, 3, 4), date(1999, 12, 31), None]
    assert frame["_bad"].to_list() == [None, None, "date"]
    pl.DataFrame({"security": ["A", "B"], "date": [20210304.0, 20210304.5]}).write_parquet(path)
    frame = ingest.read_frame(ingest.layout_from("t", str(path), None, None), DATES)[0]
    assert frame["date"].to_list() == [date(2021, 3, 4), None]


@pytest.mark.parametrize("written", ["2021-03", "202103", "2021-03-31", "20210315"])
def test_month_forms_give_the_first_day_of_the_month(tmp_path, written):
    frame = _read(tmp_path, f"security,month\nA,{written}\n", MONTHS)
    assert frame["month"].to_list() == [date(2021, 3, 1)]


def test_a_given_format_is_used_alone(tmp_path):
    frame = _read(tmp_path, "security,date\nA,04/03/2021\nB,2021-03-04\n", DATES, date_format="%d/%m/%Y")
    assert frame["date"].to_list() == [date(2021, 3, 4), None]


def test_numbers_missing_tokens_and_non_finite_values(tmp_path):
    spec = ingest.Spec("test file", numeric=("x",))
    frame = _read(tmp_path, "security,x\nA, 1.50 \nB,NaN\nC,-\nD,inf\nE,-1e400\nF,12.34.5\n", spec, missing=["-", "NaN"])
    # tokens are missing, not flagged; inf and an overflow to -inf are not finite (IEEE 754): missing, flagged
    assert frame["x"].to_list() == [1.5, None, None, None, None, None]
    assert frame["_nonfinite"].to_list() == [None, None, None, "x", "x", None]
    assert frame["_bad"].to_list() == [None, None, None, None, None, "x"]


def test_separator_and_whole_number_first_rows(tmp_path):
    spec = ingest.Spec("test file", numeric=("x",))
    rows = "".join(f"A;{i}\n" for i in range(5000)) + "B;12.3400\n"
    frame = _read(tmp_path, "security;x\n" + rows, spec, separator=";")
    assert frame.filter(pl.col("security") == "B")["x"].to_list() == [12.34] and frame["_bad"].null_count() == 5001


def test_repeated_month_in_a_returns_file_names_the_rows(tmp_path):
    path = tmp_path / "r.csv"
    path.write_text("Ticker,Mon,R\nA,2021-01-29,0.01\nB,2021-01-29,0.02\nA,2021-01-31,0.03\n")
    layout = ingest.layout_from("returns", str(path), {"Ticker": "security", "Mon": "month", "R": "ret"}, None)
    with pytest.raises(InputError, match=r"r.csv: column 'Mon' \(month\), data row 3.*data rows 1, 3"):
        read_monthly_returns(layout)
