"""Figure properties a reader relies on: distinct styles, legends off the data, titles, starting values.

The frames are small invented panels; what is checked is what the figure
shows, read back from the drawn matplotlib figure (``figures.describe``).
"""

from datetime import date

import numpy as np
import polars as pl
import pytest

from liqpanel.report import figures
from liqpanel import report as rep

MONTHS = [date(2021, m, 1) for m in range(1, 13)]


@pytest.fixture
def drawn(monkeypatch):
    """Every figure drawn through figures.save, described before it is written."""
    seen = []
    original = figures.save

    def keep(fig, stem, rid):
        seen.append({"stem": str(stem), **figures.describe(fig)})
        return original(fig, stem, rid)

    monkeypatch.setattr(figures, "save", keep)
    return seen


def _monthly(names):
    rng = np.random.default_rng(7)
    rows = {"security": [], "month": []}
    for s in range(6):
        for m in MONTHS:
            rows["security"].append(f"S{s}")
            rows["month"].append(m)
    frame = pl.DataFrame(rows)
    return frame.with_columns([pl.Series(n, rng.uniform(0.002, 0.02, frame.height)) for n in names])


def _lines(entry):
    return [line for ax in entry["axes"] for line in ax["lines"]]


def test_many_series_get_distinct_styles_and_the_legend_sits_outside(drawn, tmp_path):
    names = [f"proxy_{i}" for i in range(13)] + ["effective_spread"]
    monthly = _monthly(names)
    truth = monthly.select("security", "month", pl.col("proxy_0").alias("spread"))
    rep.figure_median_spread(monthly, truth, names, tmp_path / "spread_median", "r1", labels={"proxy_0": "Roll spread"})
    entry = drawn[-1]
    lines = _lines(entry)
    assert len(lines) == 15  # 14 estimates and the truth
    assert len({line["style"] for line in lines}) == len(lines)
    assert lines[0]["label"] == "true spread" and "Roll spread" in [line["label"] for line in lines]
    assert all(ax["legend"] and not ax["legend_over_data"] for ax in entry["axes"])
    assert entry["axes"][0]["title"] and "% of price" in entry["axes"][0]["ylabel"]


def test_series_styles_stay_distinct_well_past_the_palette():
    styles = [tuple(sorted(s.items())) for s in figures.series_styles(48)]
    assert len(set(styles)) == 48
    assert "#F0E442" not in {s["color"] for s in figures.series_styles(48)}  # the pale yellow is not used for lines


def _sort_series(names):
    rng = np.random.default_rng(3)
    return pl.DataFrame({
        "month": [m for m in MONTHS for _ in names],
        "portfolio": [n for _ in MONTHS for n in names],
        "ret": rng.normal(0.01, 0.05, len(MONTHS) * len(names)),
    })


def test_cumulative_figures_start_at_one_and_name_the_liquid_end(drawn, tmp_path):
    single = {"name": "terciles", "variable": "roll_spread", "portfolios": 3, "weight": "equal"}
    double = {"name": "size_then_roll", "variable": "roll_spread", "portfolios": 3, "within": "log_size",
              "within_portfolios": 2, "weight": "value"}
    one = _sort_series(["1", "2", "3", "high-low"])
    two = _sort_series(["1-1", "1-2", "1-3", "2-1", "2-2", "2-3", "high-low"])
    for spec, series in ((single, one), (double, two)):
        lines = rep.portfolio_lines(series, spec, {"log_size": "log market value"})
        assert all(line.y[0] == 1.0 and line.x[0] == MONTHS[0] for line in lines)  # every line starts at 1
        rep.figure_cumulative(series, tmp_path / spec["name"], "r1", spec=spec, labels={"log_size": "log market value"})
    labels_single = [line["label"] for line in _lines(drawn[0])]
    assert labels_single == ["1 (most liquid)", "2", "3 (least liquid)", "3 minus 1 (least liquid minus most liquid)"]
    labels_double = [line["label"] for line in _lines(drawn[1])]
    assert labels_double[0] == "log market value 1 (lowest), roll_spread 1 (most liquid)"
    assert labels_double[5] == "log market value 2 (highest), roll_spread 3 (least liquid)"
    for entry in drawn:
        lines = _lines(entry)
        assert len({line["style"] for line in lines}) == len(lines)
        assert not entry["axes"][0]["legend_over_data"]
    titles = [entry["axes"][0]["title"] for entry in drawn]
    assert all(titles) and len(set(titles)) == len(titles)


def test_proxies_get_one_panel_each(drawn, tmp_path):
    proxies = ["roll_spread", "gibbs_spread", "cs_spread", "ar_spread_2day", "ar_spread_monthly", "edge_spread"]
    monthly = _monthly(["effective_spread", *proxies])
    rep.figure_proxy_scatter(monthly, "effective_spread", proxies, tmp_path / "proxy", "r1")
    entry = drawn[-1]
    assert entry["title"].startswith("Spread proxies against the effective_spread")
    assert [ax["title"].split("\n")[0] for ax in entry["axes"]] == proxies
    assert all("correlation" in ax["title"] for ax in entry["axes"])


def test_liquidity_ends_follow_the_measure_family():
    # spreads are wide when illiquid; turnover is high when liquid; Pastor & Stambaugh (2003): gamma more negative
    assert rep.liquidity_ends("roll_spread") == ("most liquid", "least liquid")
    assert rep.liquidity_ends("amihud") == ("most liquid", "least liquid")
    assert rep.liquidity_ends("turnover") == ("least liquid", "most liquid")
    assert rep.liquidity_ends("ps_gamma") == ("least liquid", "most liquid")
    assert rep.liquidity_ends("log_size") is None
