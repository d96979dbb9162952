"""The printed tables: one formatting policy by kind of number, labels, months, HTML."""

import math
from datetime import date

import polars as pl

from liqpanel.report import formatting as fmt
from liqpanel import report as rep


def test_numbers_print_by_kind():
    frame = pl.DataFrame({
        "portfolio": ["1", "2", "high-low"],
        "mean_ret": [0.00896, 0.0261, -0.00748],
        "std_error": [0.0115, 0.00736, 0.00832],
        "tstat": [0.777, 2.3458, -0.8992],
        "n_months": [23, 23, 23],
        "mean_n_securities": [5.0435, 4.4783, None],
        "missing_share": [0.2979, 0.0, 1.0],
    })
    headings, cells = fmt.format_frame(frame, digits=3)
    assert headings == ["portfolio", "mean return", "standard error", "t-statistic", "months", "securities (mean)",
                        "missing share"]
    # one number of decimals per column: the column's median size (0.00896) shows 3 significant digits
    assert [r[1] for r in cells] == ["0.00896", "0.02610", "-0.00748"]
    assert [r[2] for r in cells] == ["0.01150", "0.00736", "0.00832"]  # median 0.00832: 5 decimals
    assert [r[3] for r in cells] == ["0.78", "2.35", "-0.90"]          # t-statistics: 2 decimals
    assert [r[4] for r in cells] == ["23", "23", "23"]                 # integers as integers
    assert [r[5] for r in cells] == ["5.0", "4.5", ""]                 # an average count: 1 decimal
    assert [r[6] for r in cells] == ["0.298", "0.000", "1.000"]        # shares: 3 decimals


def test_a_mixed_statistics_column_takes_the_kind_of_each_row():
    frame = pl.DataFrame({"statistic": ["mean (per month)", "t-statistic (Newey-West)", "months", "R-squared"],
                          "value": [-0.0000251, -0.00502, 23.0, 0.018]})
    _, cells = fmt.format_frame(frame, by_row=True)
    assert [r[1] for r in cells] == ["-0.0000251", "-0.01", "23", "0.018"]  # 23.0 prints as 23, never 23.0000


def test_rows_of_different_variables_keep_their_own_scale():
    frame = pl.DataFrame({"measure": ["roll_spread", "price_impact", "realized_variance_returns"],
                          "mean": [0.0178, 0.00000424, 1371.976], "sd": [0.00989, 0.0000702, 242.2339]})
    _, cells = fmt.format_frame(frame, by_row=True, labels={"roll_spread": "Roll spread"})
    assert cells == [["Roll spread", "0.0178", "0.0099"], ["price_impact", "0.0000042", "0.0000702"],
                     ["realized_variance_returns", "1372", "242"]]
    # a small variable never prints as zero (the old 0.000 problem)
    assert all(float(c) != 0 for row in cells for c in row[1:])


def test_decimals_follow_the_median_size():
    # log10(0.0158) = -1.80, floor -2: 3 - 1 + 2 = 4 decimals show 3 significant digits of 0.0158
    assert fmt.decimals_for([0.0107, 0.0158, 0.0232], 3) == 4
    assert fmt.decimals_for([1371.9, 1448.0], 3) == 0
    assert fmt.decimals_for([0.0, math.nan], 3) == 2


def test_months_print_as_year_and_month_and_labels_reach_headings():
    frame = pl.DataFrame({"month": [date(2021, 1, 1), date(2021, 2, 1)], "securities": [40, 39],
                          "missing_ln_mcap": [0.0, 0.025]})
    headings, cells = fmt.format_frame(frame, labels={"ln_mcap": "log market value"})
    assert headings == ["month", "securities", "missing: log market value"]
    assert cells == [["2021-01", "40", "0.000"], ["2021-02", "39", "0.025"]]
    assert "2021-01-01" not in rep.to_markdown(frame) and "2021-01-01" not in rep.to_latex(frame, caption="c", label="t")


def test_html_table_has_caption_cells_and_notes(tmp_path):
    frame = pl.DataFrame({"variable": ["roll_spread"], "coef": [0.5571]})
    paths = rep.write_table(frame, tmp_path / "t", caption="Liquidity & returns", label="tab:t",
                            notes="Units: fractions of the price.", labels={"roll_spread": "Roll spread"})
    assert [p.suffix for p in paths] == [".csv", ".tex", ".md", ".html"]
    html = (tmp_path / "t.html").read_text()
    assert "<caption>Liquidity &amp; returns</caption>" in html
    assert '<td class="text">Roll spread</td><td class="num">0.557</td>' in html
    assert "<em>Notes:</em> Units: fractions of the price." in html


def test_labels_replace_whole_words_in_row_labels_and_captions(tmp_path):
    labels = {"roll_spread": "Roll spread", "log_size": "log market value"}
    assert fmt.relabel("high-low roll_spread (avg over log_size groups)", labels) == (
        "high-low Roll spread (avg over log market value groups)")
    assert fmt.relabel("roll_spread_hi", labels) == "roll_spread_hi"  # only whole words
    out = rep.RunFolder(tmp_path, rid="r", labels=labels)
    out.table("sort", pl.DataFrame({"portfolio": ["1"], "mean_ret": [0.01]}), caption="Sorted on roll_spread")
    assert (tmp_path / "tables" / "sort.md").read_text().startswith("**Sorted on Roll spread**")
