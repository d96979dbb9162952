"""Portfolio sorts: hand-worked cases, an independent numpy sort, statsmodels HAC.

Hand-built panels here are worked examples of the sort rules (breakpoints at
the k/n quantiles with linear interpolation, assignment by ``<=``), not demo
data; every expected number is derived in the comment beside it.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import polars as pl
import pytest
import statsmodels.api as sm

from liqpanel.core.errors import InputError
from liqpanel.models import double_sort, sort_portfolios
from liqpanel.models.factor import liquidity_factor

JAN = dt.date(2010, 1, 1)
FEB = dt.date(2010, 2, 1)


def _hand_panel() -> pl.DataFrame:
    """Two months, ten securities; amihud 1..10, ret_next = amihud / 100.

    Month 2 reverses the order of returns (ret_next = (11 - amihud) / 100).
    market_cap of security with amihud v is v (so value weights favour the
    larger value within each portfolio).
    """
    v = np.arange(1, 11, dtype=float)
    return pl.DataFrame(
        {
            "security": [f"AA{i:02d}" for i in range(10)] * 2,
            "month": [JAN] * 10 + [FEB] * 10,
            "amihud": np.r_[v, v],
            "ret_next": np.r_[v / 100, (11 - v) / 100],
            "market_cap": np.r_[v, v],
            "log_size": np.r_[v * 0.5, v * 0.5],
        }
    )


def test_hand_built_quintiles_equal_weighted():
    res = sort_portfolios(_hand_panel(), "amihud", n=5, min_securities=1, characteristics=["log_size"])
    # Breakpoints of 1..10 at 0.2, 0.4, 0.6, 0.8 with linear interpolation:
    # positions 1.8, 3.6, 5.4, 7.2 -> 2.8, 4.6, 6.4, 8.2 (numpy.quantile, method "linear").
    bp = res.breakpoints.filter(pl.col("month") == JAN).row(0, named=True)
    assert [bp[f"breakpoint_{k}"] for k in range(1, 5)] == pytest.approx([2.8, 4.6, 6.4, 8.2])
    assert [bp[f"breakpoint_{k}"] for k in range(1, 5)] == pytest.approx(
        np.quantile(np.arange(1, 11), [0.2, 0.4, 0.6, 0.8])
    )
    # Portfolios {1,2},{3,4},{5,6},{7,8},{9,10}: EW returns 1.5%, 3.5%, ..., 9.5% in Jan.
    jan = res.returns.filter(pl.col("month") == JAN)
    assert jan.get_column("ret").to_list() == pytest.approx([0.015, 0.035, 0.055, 0.075, 0.095])
    assert jan.get_column("n_securities").to_list() == [2] * 5
    # Feb returns are (11 - v)/100: 9.5%, ..., 1.5%.
    feb = res.returns.filter(pl.col("month") == FEB)
    assert feb.get_column("ret").to_list() == pytest.approx([0.095, 0.075, 0.055, 0.035, 0.015])
    # High-minus-low: Jan 0.095 - 0.015 = 0.08, Feb -0.08 -> mean 0.
    assert res.hml_returns.get_column("ret").to_list() == pytest.approx([0.08, -0.08])
    assert res.hml.mean == pytest.approx(0.0, abs=1e-15)
    assert res.hml.n_months == 2
    # Summary: mean over the two months of each portfolio = 5.5% for all five.
    assert res.summary.get_column("mean_ret").to_list() == pytest.approx([0.055] * 5)
    # Average log_size of portfolio 1: members v = 1, 2 -> 0.75 in both months.
    assert res.summary.get_column("log_size").to_list() == pytest.approx([0.75, 1.75, 2.75, 3.75, 4.75])
    assert (res.nobs, res.nobs_dropped, res.unassigned, res.thin_portfolio_months) == (20, 0, 0, 0)


def test_hand_built_quintiles_value_weighted():
    res = sort_portfolios(_hand_panel(), "amihud", n=5, weight="market_cap", min_securities=1)
    jan = res.returns.filter(pl.col("month") == JAN).get_column("ret").to_list()
    # Portfolio {1,2} with weights 1, 2: (0.01*1 + 0.02*2)/3 = 0.05/3.
    # Portfolio {9,10}: (0.09*9 + 0.10*10)/19 = 1.81/19.
    expected = [(a * a + b * b) / 100 / (a + b) for a, b in [(1, 2), (3, 4), (5, 6), (7, 8), (9, 10)]]
    assert jan == pytest.approx(expected)
    assert jan[0] == pytest.approx(0.05 / 3) and jan[4] == pytest.approx(1.81 / 19)


def test_ties_at_a_breakpoint_go_to_the_lower_portfolio():
    panel = pl.DataFrame(
        {"security": ["A", "B", "C", "D", "E"], "month": [JAN] * 5,
         "amihud": [1.0, 2.0, 2.0, 3.0, 4.0], "ret_next": [0.01, 0.02, 0.03, 0.04, 0.05]}
    )
    res = sort_portfolios(panel, "amihud", n=2, min_securities=1)
    # Median of (1, 2, 2, 3, 4) = 2 (numpy.quantile); 2 <= 2 -> portfolio 1 holds A, B, C.
    assert res.breakpoints.item(0, "breakpoint_1") == 2.0
    assert res.returns.get_column("n_securities").to_list() == [3, 2]
    assert res.returns.get_column("ret").to_list() == pytest.approx([0.02, 0.045])


def test_min_securities_rule_blanks_thin_portfolios():
    panel = _hand_panel()
    res = sort_portfolios(panel, "amihud", n=5, min_securities=3)
    # Every quintile has 2 members < 3: all 10 portfolio-months blank, no HML.
    assert res.returns.get_column("ret").null_count() == 10
    assert res.thin_portfolio_months == 10
    assert res.hml.n_months == 0
    res2 = sort_portfolios(panel, "amihud", n=2, min_securities=5)
    # Halves of 5: exactly at the minimum, so all returns exist:
    # Jan (1+..+5)/500 = 0.03, (6+..+10)/500 = 0.08.
    assert res2.returns.filter(pl.col("month") == JAN).get_column("ret").to_list() == pytest.approx([0.03, 0.08])
    assert res2.thin_portfolio_months == 0


def test_breakpoint_universe_sets_breakpoints_for_everyone():
    panel = pl.DataFrame(
        {
            "security": [f"U{i}" for i in range(5)] + ["X1", "X2", "X3"],
            "month": [JAN] * 8,
            "amihud": [1.0, 2.0, 3.0, 4.0, 5.0, 0.5, 10.0, 11.0],
            "ret_next": [0.01, 0.02, 0.03, 0.04, 0.05, 0.10, 0.20, 0.30],
            "in_universe": [True] * 5 + [False, False, None],
        }
    )
    res = sort_portfolios(panel, "amihud", n=2, breakpoint_universe="in_universe", min_securities=1)
    # Universe values 1..5 -> median 3 (the three outsiders do not move it; a
    # null flag counts as outside). Portfolio 1: 1, 2, 3, 0.5 -> (0.01+0.02+0.03+0.10)/4 = 0.04.
    # Portfolio 2: 4, 5, 10, 11 -> (0.04+0.05+0.20+0.30)/4 = 0.1475.
    assert res.breakpoints.item(0, "breakpoint_1") == 3.0
    assert res.breakpoints.item(0, "n_universe") == 5
    assert res.returns.get_column("ret").to_list() == pytest.approx([0.04, 0.1475])
    # A universe of one security (fewer than n = 2) gives no breakpoints: the
    # month is counted and its securities are not assigned.
    few = panel.with_columns(pl.col("security").is_in(["U0"]).alias("in_universe"))
    res_few = sort_portfolios(few, "amihud", n=2, breakpoint_universe="in_universe", min_securities=1)
    assert res_few.months_without_breakpoints == 1
    assert res_few.unassigned == 8 and res_few.nobs == 0
    assert res_few.returns.height == 0


def test_missing_values_are_dropped_and_counted():
    panel = _hand_panel().with_columns(
        pl.when(pl.col("security") == "AA00").then(None).otherwise(pl.col("ret_next")).alias("ret_next"),
        pl.when(pl.col("security") == "AA01").then(-1.0).otherwise(pl.col("market_cap")).alias("market_cap"),
    )
    ew = sort_portfolios(panel, "amihud", n=2, min_securities=1)
    assert ew.nobs_dropped == 2 and ew.nobs == 18  # AA00 has no return in either month
    vw = sort_portfolios(panel, "amihud", n=2, weight="market_cap", min_securities=1)
    assert vw.nobs_dropped == 4  # plus AA01's non-positive weight in both months


def _numpy_sort(panel: pl.DataFrame, on: str, n: int, weight: str | None, universe: str | None,
                min_securities: int) -> dict:
    """Independent sort: numpy.quantile breakpoints, numpy.searchsorted labels, numpy.average."""
    out = {}
    frame = panel.drop_nulls([on, "ret_next"] + ([weight] if weight else []))
    for (month,), block in frame.group_by("month"):
        x = block.get_column(on).to_numpy()
        uni = block.get_column(universe).fill_null(False).to_numpy() if universe else np.ones(len(x), bool)
        if uni.sum() < n:
            continue
        bps = np.quantile(x[uni], np.arange(1, n) / n)
        label = np.searchsorted(bps, x, side="left") + 1  # x <= bp_k -> portfolio k
        r = block.get_column("ret_next").to_numpy()
        w = block.get_column(weight).to_numpy() if weight else np.ones(len(x))
        for p in range(1, n + 1):
            members = label == p
            out[(month, p)] = (np.average(r[members], weights=w[members])
                               if members.sum() >= min_securities else None, int(members.sum()))
    return out


@pytest.mark.parametrize("weight,universe", [(None, None), ("market_cap", None), ("market_cap", "in_breakpoint_set")])
def test_sort_matches_independent_numpy_sort(weight, universe):
    rng = np.random.default_rng(17)
    n_sec, n_months = 80, 24
    months = [dt.date(2005 + m // 12, m % 12 + 1, 1) for m in range(n_months)]
    amihud = rng.lognormal(size=n_sec * n_months)
    amihud[rng.random(amihud.size) < 0.05] = np.nan
    panel = pl.DataFrame(
        {
            "security": [f"S{i:03d}" for i in range(n_sec)] * n_months,
            "month": [m for m in months for _ in range(n_sec)],
            "amihud": amihud,
            "ret_next": rng.normal(0.01, 0.08, n_sec * n_months),
            "market_cap": rng.lognormal(5, 1, n_sec * n_months),
            "in_breakpoint_set": rng.random(n_sec * n_months) < 0.4,
        }
    ).with_columns(pl.col("amihud").fill_nan(None))
    res = sort_portfolios(panel, "amihud", n=5, weight=weight, breakpoint_universe=universe, min_securities=6)
    expected = _numpy_sort(panel, "amihud", 5, weight, universe, 6)
    got = {(r["month"], r["portfolio"]): (r["ret"], r["n_securities"]) for r in res.returns.iter_rows(named=True)}
    assert got.keys() == expected.keys()
    for key, (ret, count) in expected.items():
        assert got[key][1] == count
        if ret is None:
            assert got[key][0] is None
        else:
            assert got[key][0] == pytest.approx(ret, rel=1e-12)


def test_high_minus_low_recovers_known_premium_with_statsmodels_newey_west():
    # Simulation truth: ret_next = 0.02 * u + noise, u ~ U(0, 1). Quintile means
    # of u are 0.1 and 0.9, so E[HML] = 0.02 * 0.8 = 0.016 per month.
    rng = np.random.default_rng(5)
    n_sec, n_months = 500, 120
    u = rng.random(n_sec * n_months)
    months = [dt.date(2000 + m // 12, m % 12 + 1, 1) for m in range(n_months)]
    panel = pl.DataFrame(
        {
            "security": [f"S{i:03d}" for i in range(n_sec)] * n_months,
            "month": [m for m in months for _ in range(n_sec)],
            "amihud": u,
            "ret_next": 0.02 * u + rng.normal(0, 0.05, u.size),
        }
    )
    res = sort_portfolios(panel, "amihud", n=5, lags=4)
    assert abs(res.hml.mean - 0.016) < 4 * res.hml.std_error
    # derived band: each quintile holds 100 securities with noise sd 0.05, so a
    # month's HML has sd 0.05 sqrt(2/100) = 0.0071 and the mean over 120 months
    # 0.00065; 0.003 is 4.6 of those
    assert res.hml.mean == pytest.approx(0.016, abs=0.003)
    # Newey & West (1987) t: statsmodels OLS on a constant, HAC, maxlags=4, T/(T-1).
    series = res.hml_returns.get_column("ret").to_numpy()
    hac = sm.OLS(series, np.ones_like(series)).fit(cov_type="HAC", cov_kwds={"maxlags": 4, "use_correction": True})
    assert res.hml.tstat == pytest.approx(hac.tvalues[0], rel=1e-10)
    assert res.hml.lags == 4 and res.hml.n_months == 120


# ------------------------------------------------------------- double sorts


def _double_panel() -> pl.DataFrame:
    """One month, 8 securities: small firms are illiquid (amihud 10..40), big liquid (1..4)."""
    return pl.DataFrame(
        {
            "security": [f"D{i}" for i in range(8)],
            "month": [JAN] * 8,
            "log_size": [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0],
            "amihud": [10.0, 20.0, 30.0, 40.0, 1.0, 2.0, 3.0, 4.0],
            "ret_next": [0.01, 0.02, 0.05, 0.06, 0.00, 0.01, 0.01, 0.04],
        }
    )


def test_dependent_double_sort_hand_built():
    res = double_sort(_double_panel(), "log_size", "amihud", n1=2, n2=2, min_securities=1)
    # Size median 4.5 -> small {D0..D3}, big {D4..D7}. Within small, amihud median 25:
    # liquid {D0, D1} 0.015, illiquid {D2, D3} 0.055. Within big, median 2.5:
    # liquid {D4, D5} 0.005, illiquid {D6, D7} 0.025.
    assert res.returns.get_column("ret").to_list() == pytest.approx([0.015, 0.055, 0.005, 0.025])
    assert res.returns.get_column("n_securities").to_list() == [2, 2, 2, 2]
    # HML within groups: 0.04 and 0.02; average 0.03.
    assert res.hml_by_first.get_column("mean_ret").to_list() == pytest.approx([0.04, 0.02])
    assert res.hml_returns.get_column("ret").to_list() == pytest.approx([0.03])


def test_independent_double_sort_hand_built():
    res = double_sort(_double_panel(), "log_size", "amihud", n1=2, n2=2, dependent=False, min_securities=1)
    # Unconditional amihud median = (4 + 10)/2 = 7: all small firms illiquid, all big liquid.
    assert res.returns.get_column("n_securities").to_list() == [0, 4, 4, 0]
    assert res.returns.get_column("ret").to_list()[1] == pytest.approx(0.035)
    assert res.returns.get_column("ret").to_list()[2] == pytest.approx(0.015)
    # Empty corners -> no within-group spread in either size group, no average.
    assert res.hml.n_months == 0 and res.thin_portfolio_months == 2


def test_double_sort_hml_matches_numpy_on_simulated_panel():
    rng = np.random.default_rng(8)
    n_sec, n_months = 120, 36
    months = [dt.date(2001 + m // 12, m % 12 + 1, 1) for m in range(n_months)]
    size = rng.normal(size=n_sec * n_months)
    amihud = -0.5 * size + rng.normal(size=size.size)
    panel = pl.DataFrame(
        {"security": [f"S{i:03d}" for i in range(n_sec)] * n_months,
         "month": [m for m in months for _ in range(n_sec)],
         "log_size": size, "amihud": amihud, "ret_next": rng.normal(0.01, 0.05, size.size)}
    )
    res = double_sort(panel, "log_size", "amihud", n1=2, n2=3, min_securities=1, lags=2)
    expected = []
    for (_,), block in panel.sort("month").group_by("month", maintain_order=True):
        s, a, r = (block.get_column(c).to_numpy() for c in ("log_size", "amihud", "ret_next"))
        g = np.searchsorted(np.quantile(s, [0.5]), s, side="left") + 1
        spreads = []
        for grp in (1, 2):
            m = g == grp
            lab = np.searchsorted(np.quantile(a[m], [1 / 3, 2 / 3]), a[m], side="left") + 1
            spreads.append(r[m][lab == 3].mean() - r[m][lab == 1].mean())
        expected.append(np.mean(spreads))
    np.testing.assert_allclose(res.hml_returns.get_column("ret").to_numpy(), expected, rtol=1e-12)
    # Dependent sort: each size half has 60 securities -> 20 per amihud tertile.
    assert set(res.returns.get_column("n_securities").to_list()) == {20}


def test_sort_input_errors_name_the_column():
    with pytest.raises(InputError, match="'roll_spread'"):
        sort_portfolios(_hand_panel(), "roll_spread")
    with pytest.raises(InputError, match="breakpoint universe column 'amihud' must be boolean"):
        sort_portfolios(_hand_panel(), "log_size", breakpoint_universe="amihud")
    with pytest.raises(ValueError, match="n must be an integer of at least 2"):
        sort_portfolios(_hand_panel(), "amihud", n=1)


def _two_market_panel(seed: int = 7) -> pl.DataFrame:
    """A hand-built panel of two markets whose liquidity levels differ tenfold (invented)."""
    rng = np.random.default_rng(seed)
    rows = []
    for month in (dt.date(2020, 1, 1), dt.date(2020, 2, 1), dt.date(2020, 3, 1)):
        for market, scale, count in (("AAA", 0.01, 13), ("BBB", 0.1, 17)):
            for i in range(count):
                rows.append({"security": f"{market}-{i:02d}", "month": month, "market": market,
                             "spread": scale * rng.uniform(0.5, 1.5), "ret_next": rng.normal(0.0, 0.05)})
    return pl.DataFrame(rows)


def test_per_market_breakpoints_are_each_markets_quantiles():
    # numpy.quantile (linear interpolation, numpy's default method) within each market and month
    panel = _two_market_panel()
    res = sort_portfolios(panel, on="spread", n=3, min_securities=1, breakpoints="per_market")
    for (month, market), group in panel.group_by("month", "market"):
        values = group.get_column("spread").to_numpy()
        row = res.breakpoints.filter((pl.col("month") == month) & (pl.col("market") == market))
        assert row.height == 1
        np.testing.assert_allclose([row.item(0, "breakpoint_1"), row.item(0, "breakpoint_2")],
                                   np.quantile(values, [1 / 3, 2 / 3]), rtol=1e-12)
    # each market's securities fill all three portfolios; pooled, the liquid market sits in portfolio 1
    assert res.nobs == panel.height
    pooled = sort_portfolios(panel, on="spread", n=3, min_securities=1)
    assert pooled.breakpoints.columns[:2] == ["month", "n_universe"]
    np.testing.assert_allclose(
        pooled.breakpoints.filter(pl.col("month") == dt.date(2020, 1, 1)).select("breakpoint_1", "breakpoint_2").row(0),
        np.quantile(panel.filter(pl.col("month") == dt.date(2020, 1, 1))["spread"].to_numpy(), [1 / 3, 2 / 3]),
        rtol=1e-12)


def test_per_market_portfolio_returns_pool_the_markets():
    # the portfolio-k return pools both markets' members of k: equal-weighted mean by hand (common practice)
    panel = _two_market_panel(11)
    res = sort_portfolios(panel, on="spread", n=3, min_securities=1, breakpoints="per_market")
    bps = res.breakpoints
    by_hand = (
        panel.join(bps, on=["month", "market"])
        .with_columns((1 + (pl.col("spread") > pl.col("breakpoint_1")).cast(pl.Int32)
                       + (pl.col("spread") > pl.col("breakpoint_2")).cast(pl.Int32)).alias("portfolio"))
        .group_by("month", "portfolio").agg(pl.col("ret_next").mean().alias("expected"), pl.len().alias("n"))
    )
    got = res.returns.join(by_hand, on=["month", "portfolio"])
    assert got.height == 9
    np.testing.assert_allclose(got["ret"].to_numpy(), got["expected"].to_numpy(), rtol=1e-12)
    assert got["n_securities"].to_list() == got["n"].cast(pl.Int64).to_list()


def test_per_market_factor_follows():
    # the liquidity factor's double sort takes the same option (Fama & French 1993 construction, per market)
    panel = _two_market_panel(3)
    panel = panel.with_columns(pl.Series("log_size", np.random.default_rng(5).normal(20.0, 1.0, panel.height)))
    pooled = liquidity_factor(panel, measure="spread", n_size=2, n_liq=2, min_securities=1)
    within = liquidity_factor(panel, measure="spread", n_size=2, n_liq=2, min_securities=1, breakpoints="per_market")
    assert pooled.height == within.height == 3
    assert not np.allclose(pooled["factor_ret"].to_numpy(), within["factor_ret"].to_numpy())
    expected = double_sort(panel, first="log_size", second="spread", n1=2, n2=2, min_securities=1,
                           breakpoints="per_market").hml_returns
    np.testing.assert_allclose(within["factor_ret"].to_numpy(), expected["ret"].to_numpy(), rtol=1e-12)


def test_per_market_without_a_market_column():
    with pytest.raises(InputError, match="breakpoints per market need the panel's 'market' column"):
        sort_portfolios(_two_market_panel().drop("market"), on="spread", n=3, breakpoints="per_market")
