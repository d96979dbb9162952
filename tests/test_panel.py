"""The panel stage: next-month returns and characteristics without look-ahead."""

from datetime import date

import polars as pl
import pytest

from liqpanel.panel import build_panel, monthly_from_daily


def _monthly():
    months = [date(2021, m, 1) for m in range(1, 7)]
    return pl.DataFrame({"security": ["A"] * 6, "month": months, "roll_spread": [0.01 * m for m in range(1, 7)]})


def _returns():
    months = [date(2021, m, 1) for m in range(1, 8)]
    return pl.DataFrame({"security": ["A"] * 7, "month": months, "ret": [0.1 * m for m in range(1, 8)]})


def test_ret_next_is_the_following_month():
    panel = build_panel(_monthly().lazy(), returns=_returns().lazy())
    assert panel["ret_next"].to_list() == pytest.approx([0.2, 0.3, 0.4, 0.5, 0.6, 0.7])


def test_characteristic_is_not_used_before_it_is_public():
    # An annual value dated 2021-01-31 with a 3-month lag is public from April
    # 2021; the look-ahead trap is a value dated 2021-03-31 (the "future"
    # value 99) which with the lag becomes public only in June.
    accounts = pl.DataFrame(
        {"security": ["A", "A"], "date": [date(2021, 1, 31), date(2021, 3, 31)], "book_to_market": [1.0, 99.0]}
    )
    source = {"name": "accounts", "frame": accounts.lazy(), "variables": ["book_to_market"], "lag_months": 3}
    panel = build_panel(_monthly().lazy(), returns=_returns().lazy(), characteristics=[source])
    got = dict(zip(panel["month"].to_list(), panel["book_to_market"].to_list()))
    assert got[date(2021, 1, 1)] is None  # nothing public yet
    assert got[date(2021, 3, 1)] is None
    assert got[date(2021, 4, 1)] == 1.0  # Jan value + 3 months
    assert got[date(2021, 5, 1)] == 1.0  # the March value is not yet public
    assert got[date(2021, 6, 1)] == 99.0


def test_month_end_data_is_usable_in_its_own_month():
    size = pl.DataFrame({"security": ["A"] * 2, "date": [date(2021, 1, 29), date(2021, 2, 26)], "log_size": [5.0, 6.0]})
    source = {"name": "market", "frame": size.lazy(), "variables": ["log_size"], "lag_months": 0}
    panel = build_panel(_monthly().lazy(), returns=_returns().lazy(), characteristics=[source])
    assert panel["log_size"].to_list()[:3] == [5.0, 6.0, 6.0]


def test_monthly_return_compounds_daily_returns():
    daily = pl.DataFrame(
        {"security": ["A"] * 3, "month": [date(2021, 1, 1)] * 3, "ret": [0.1, -0.1, 0.05]}
    )
    out = monthly_from_daily(daily.lazy()).collect()
    assert out["ret"][0] == pytest.approx(1.1 * 0.9 * 1.05 - 1)


def test_duplicate_keys_are_rejected():
    from liqpanel.core.errors import InputError

    monthly = pl.concat([_monthly(), _monthly().head(1)])
    with pytest.raises(InputError, match="duplicate"):
        build_panel(monthly.lazy(), returns=_returns().lazy())


def test_latest_dated_row_of_a_month_holds_whatever_the_row_order():
    # Two rows public in March 2021 (dated the 10th and the 31st): the later
    # one holds, written first or last in the file.
    for order in (slice(None), slice(None, None, -1)):
        rows = pl.DataFrame({"security": ["A", "A"], "date": [date(2021, 3, 10), date(2021, 3, 31)], "x": [1.0, 2.0]})[order]
        source = {"name": "s", "frame": rows.lazy(), "variables": ["x"], "lag_months": 0}
        panel = build_panel(_monthly().lazy(), returns=_returns().lazy(), characteristics=[source])
        assert panel.filter(pl.col("month") == date(2021, 3, 1))["x"].item() == 2.0


def test_characteristics_audit_accounts_for_every_row():
    from liqpanel.panel import audit_summary, characteristics_audit

    # The panel holds security A, January to June 2021 (_monthly).
    rows = pl.DataFrame({
        "security": ["A", "A", "A", "A", "A", "A", "Z", "A"],
        "date": [date(2020, 6, 30), date(2020, 12, 31),  # replaced before use, then used (January to February)
                 date(2021, 3, 10), date(2021, 3, 31),  # same month: the 10th gives way to the 31st (used)
                 date(2021, 2, 26), date(2021, 9, 30),  # used; public after June
                 date(2021, 1, 29), None],  # security not in the panel; no date
        "x": [1.0] * 8,
    })
    source = {"name": "accounts", "frame": rows.lazy(), "variables": ["x"], "lag_months": 0}
    panel = build_panel(_monthly().lazy(), returns=_returns().lazy(), characteristics=[source])
    audit = characteristics_audit(panel.select("security", "month"), [source]).row(0, named=True)
    assert audit == {
        "source": "accounts", "read": 8, "no_date": 1, "same_month": 1, "security_not_in_panel": 1,
        "replaced_before_use": 1, "after_last_month": 1, "used": 3,
    }
    printed = audit_summary(characteristics_audit(panel.select("security", "month"), [source]))
    assert printed["rows"].to_list()[:3] == ["read", "used", "not used: no_date"]
    assert printed["share"].to_list()[:2] == pytest.approx([1.0, 3 / 8])


def test_two_characteristics_rows_on_one_date_stop_the_run(tmp_path):
    from liqpanel.core.errors import InputError
    from liqpanel.panel import read_characteristics

    path = tmp_path / "chars.csv"
    path.write_text("ticker,day,bm\nA,2021-01-29,0.5\nB,2021-01-29,0.7\nA,2021-01-29,0.6\n")
    entry = {"name": "acc", "path": str(path), "date_column": "date", "variables": ["bm"],
             "columns": {"ticker": "security", "day": "date"}}
    with pytest.raises(InputError) as caught:
        read_characteristics(entry)
    message = str(caught.value)
    assert str(path) in message and "data rows 1, 3" in message and "'day'" in message
