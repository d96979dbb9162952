"""The simulation study calibrated to a market's own data (liqpanel.study).

Checks: calibration recovers the conditions of a simulated market with known
truth (Poisson identities via scipy); the study's statistics match numpy;
on a market without a spread the unbiased estimators come out near zero;
three regularities of the literature are reproduced within stated bands; the
same seed gives the same tables.
"""

from __future__ import annotations

import math

import numpy as np
import polars as pl
import pytest
from polars.testing import assert_frame_equal
from scipy import stats

from liqpanel import study
from liqpanel.bars import daily_bars
from liqpanel.config import load_schema
from liqpanel.core.errors import ConfigError
from liqpanel.simulate import simulate_market, simulate_security_months


def conditions(spread, vol, lam, n_days=21) -> pl.DataFrame:
    """A pool of security-month conditions given directly: every combination of the values."""
    spread, vol, lam = (g.ravel() for g in np.meshgrid(*(np.atleast_1d(np.asarray(x, dtype=float)) for x in (spread, vol, lam)),
                                                       indexing="ij"))
    return pl.DataFrame({"spread": spread, "daily_vol": vol, "trades_per_day": lam, "n_days": np.full(spread.size, n_days)})


def paired(spread, vol, lam, n_days=21) -> pl.DataFrame:
    """A pool of security-month conditions given element by element."""
    spread, vol, lam = np.broadcast_arrays(*(np.atleast_1d(np.asarray(x, dtype=float)) for x in (spread, vol, lam)))
    return pl.DataFrame({"spread": spread, "daily_vol": vol, "trades_per_day": lam, "n_days": np.full(spread.size, n_days)})


def by_bin(result: study.StudyResult, estimator: str, table: str = "by_spread_vol") -> list[dict]:
    return getattr(result, table).filter(pl.col("estimator") == estimator).to_dicts()


# ---------------------------------------------------------------- calibration


@pytest.fixture(scope="module")
def known_market():
    """Three kinds of security over January to March 2021 (64 business days), known truth."""
    half = np.repeat([0.005, 0.002, 0.01], 30)
    vol = np.repeat([0.02, 0.015, 0.03], 30)
    lam = np.repeat([20.0, 40.0, 1.2], 30)
    market = simulate_security_months(half, vol, lam, n_days=64, seed=5)
    daily = daily_bars(market.trades.lazy(), "America/New_York").collect()
    return market, daily


WINDOW = {1: 21, 2: 20, 3: 23}  # business days of January, February, March 2021


def test_calibration_recovers_known_conditions(known_market):
    market, daily = known_market
    truth = market.truth.join(market.securities.select("security", "trades_per_day", "daily_vol"), on="security")
    monthly = truth.select("security", "month", (2.0 * pl.col("half_spread").tanh()).alias("effective_spread"))
    pool, audit = study.calibrate(daily.lazy(), monthly, study={"min_days": 5})
    joined = pool.join(truth, on=["security", "month"], suffix="_true").with_columns(
        pl.col("month").dt.month().replace_strict(WINDOW).alias("market_days"))
    # The window is the market's trading days in the month within the security's listed span
    # (first to last day with a trade, common practice), so only a rarely traded security's
    # first and last months can be shorter.
    assert joined.select((pl.col("n_days") <= pl.col("market_days")).all()).item()
    liquid = joined.filter(pl.col("trades_per_day_true") > 10)
    assert (liquid.get_column("n_days") == liquid.get_column("market_days")).all()
    inner = joined.filter((pl.col("trades_per_day_true") > 10) | (pl.col("month").dt.month() == 2))
    assert (inner.get_column("n_days") == inner.get_column("market_days")).all()
    for rate in (20.0, 40.0, 1.2):
        group = inner.filter(pl.col("trades_per_day_true") == rate)
        # trades per day from the trade counts: the Poisson mean (Poisson arrivals, as simulated),
        # within 4 standard errors sqrt(rate / days) of a Poisson mean
        days = group.get_column("n_days").sum()
        assert abs(group.get_column("trades_per_day").mean() - rate) < 4 * math.sqrt(rate / days)
        # share of days without a trade: P(N = 0) = exp(-rate) for a Poisson count (scipy.stats.poisson)
        p0 = stats.poisson.pmf(0, rate)
        se = math.sqrt(p0 * (1 - p0) / group.get_column("n_days").sum())
        assert abs(group.get_column("no_trade_share").mean() - p0) < 4 * se + 1e-9
    # The spread level is the month's value of the monthly column when it exists.
    assert joined.select((pl.col("spread") - 2.0 * pl.col("half_spread").tanh()).abs().max()).item() < 1e-12
    assert pool.get_column("spread_source")[0].startswith("effective_spread (monthly column")
    # Yang & Zhang (2000) volatility at 20-40 trades a day: within 10% of the truth on average
    # (measured 0.96); at 1.2 trades a day the missed extremes bias it down.
    ratio = liquid.select((pl.col("daily_vol") / pl.col("daily_vol_true")).mean()).item()
    assert 0.9 < ratio < 1.05
    counts = dict(audit.iter_rows())
    assert counts["read"] == 270 and counts["kept"] + sum(v for k, v in counts.items() if k.startswith("dropped")) == 270


def test_calibration_without_trade_counts_or_spread_column(known_market):
    market, daily = known_market
    no_counts = daily.with_columns(pl.lit(None, dtype=pl.Int64).alias("n_trades")).lazy()
    pool, _ = study.calibrate(no_counts, None, study={"min_days": 5, "trades_per_day_when_unknown": 77.0})
    joined = pool.join(market.securities.select("security", pl.col("trades_per_day").alias("rate")), on="security")
    sparse = joined.filter((pl.col("rate") == 1.2) & (pl.col("month").dt.month() == 2))
    # -ln(share of days without a trade) estimates the Poisson rate, as exp(-rate) = P(N = 0)
    assert sparse.get_column("trades_source").unique().to_list() == ["days without trades"]
    # Band derived: over February's 20 days the share of empty days (e^-1.2 = 0.30)
    # has binomial sd sqrt(0.3 x 0.7 / 20) = 0.10, so one month's rate has sd
    # 0.10 / 0.30 = 0.34 (delta method; measured 0.40 over the 30 securities) and
    # their median about 1.25 x 0.34 / sqrt(30) = 0.08; 15% of 1.2 is 2.3 of those
    # (measured median 1.204).
    assert sparse.get_column("trades_per_day").median() == pytest.approx(1.2, rel=0.15)
    dense = joined.filter(pl.col("rate") == 40.0)
    assert dense.get_column("trades_per_day").unique().to_list() == [77.0]
    # Without the column the spread level is the security's median EDGE over its months.
    assert pool.group_by("security").agg(pl.col("spread").n_unique()).get_column("spread").max() == 1
    assert "edge_spread (security median" in pool.get_column("spread_source")[0]
    # At 1.2 trades a day P(N > 0) = 0.70, so about 14 of 20-23 days trade: with 15 days required
    # many months are dropped by a named rule, and every month read is kept or dropped.
    _, audit = study.calibrate(no_counts, None, study={"min_days": 15})
    counts = dict(audit.iter_rows())
    assert counts["dropped: too_few_trading_days"] > 30
    assert counts["kept"] + counts["dropped: too_few_trading_days"] + counts["dropped: no_volatility"] + \
        counts["dropped: no_spread"] == counts["read"] == 270


# ---------------------------------------------------------------- statistics


@pytest.fixture(scope="module")
def small_study():
    pool = conditions([0.004, 0.01, 0.02], [0.02, 0.015], [3.0, 20.0])
    settings = {"draws": 400, "seed": 11, "measures": ["roll_spread", "edge_spread", "gibbs_spread", "vol_close"]}
    measures = {"gibbs_spread": {"sweeps": 300, "burn": 100}}
    return pool, settings, measures, study.run_study(pool, study=settings, measures=measures)


def test_statistics_match_numpy(small_study):
    _, _, _, result = small_study
    long = result.long.filter(pl.col("estimator") == "gibbs_spread")
    est, truth = long.get_column("estimate").to_numpy(), long.get_column("truth").to_numpy()
    ok = ~np.isnan(est)
    err = est[ok] - truth[ok]
    row = result.overall.filter(pl.col("estimator") == "gibbs_spread").row(0, named=True)
    assert row["n"] == 400 and row["n_estimates"] == ok.sum()
    assert row["mean_bias"] == pytest.approx(err.mean(), rel=1e-12)
    assert row["median_bias"] == pytest.approx(np.median(err), rel=1e-12)
    assert row["rmse"] == pytest.approx(math.sqrt((err**2).mean()), rel=1e-12)
    assert row["correlation"] == pytest.approx(np.corrcoef(est[ok], truth[ok])[0, 1], rel=1e-9)
    lo, hi = long.get_column("lower").to_numpy()[ok], long.get_column("upper").to_numpy()[ok]
    assert row["coverage"] == pytest.approx(np.mean((truth[ok] >= lo) & (truth[ok] <= hi)), rel=1e-12)
    # Only the Gibbs sampler has an interval.
    assert result.overall.filter(pl.col("coverage").is_not_null()).get_column("estimator").to_list() == ["gibbs_spread"]
    # The truth targets: spreads against 2c, sigma_u estimates against the daily volatility.
    sigma = result.long.filter(pl.col("estimator") == "roll_sigma_u").join(
        result.conditions.select("security", "daily_vol"), on="security")
    assert sigma.select((pl.col("truth") - pl.col("daily_vol")).abs().max()).item() == 0.0
    spread = result.long.filter(pl.col("estimator") == "edge_spread").join(
        result.conditions.select("security", "spread"), on="security")
    assert spread.select((pl.col("truth") - pl.col("spread")).abs().max()).item() < 1e-15


def test_same_seed_same_tables_other_seed_differs(small_study):
    pool, settings, measures, first = small_study
    again = study.run_study(pool, study=settings, measures=measures)
    for name in ("overall", "by_spread_vol", "by_intensity", "by_cell", "long"):
        assert_frame_equal(getattr(first, name), getattr(again, name))
    assert study.summary_text(first) == study.summary_text(again)
    other = study.run_study(pool, study={**settings, "seed": 12}, measures=measures)
    assert not other.overall.equals(first.overall)


def test_bins_from_quantiles_or_given_edges(small_study):
    _, _, _, result = small_study
    # Two rates drawn: the quartile edges cannot split a value, so each rate lies in one bin,
    # the lower rate in the lowest bin, and the two rates apart.
    rates = result.truth.group_by("true_trades_per_day").agg(pl.col("intensity_bin").unique()).sort("true_trades_per_day")
    assert rates.get_column("intensity_bin").to_list()[0] == [0]
    assert len(rates.get_column("intensity_bin").to_list()[1]) == 1
    assert rates.get_column("intensity_bin").to_list()[1][0] > 0
    spread_vol = result.truth.get_column("spread_vol_bin").value_counts().sort("spread_vol_bin")
    assert spread_vol.get_column("count").min() > 0.15 * 400  # six ratios split into quartiles
    given = study.add_bins(result.truth.select(*[c for c in result.truth.columns if not c.startswith(("spread_vol", "intensity"))]),
                           {"spread_vol_edges": [0.5, 1.0], "intensity_edges": [10.0]})
    ratio = given.get_column("spread_vol").to_numpy()
    assert (given.get_column("spread_vol_bin").to_numpy() == np.searchsorted([0.5, 1.0], ratio, side="right")).all()
    assert set(given.get_column("spread_vol_range")) <= {"below 0.5", "0.5 to 1", "1 and above"}
    assert set(given.get_column("intensity_range")) == {"below 10", "10 and above"}


# ---------------------------------------------------------------- no spread


def test_market_without_spread_gives_estimates_near_zero():
    # A whole market with no spread: calibrated from its own daily bars (the effective spread of
    # such a market is 0), then studied. Corwin & Schultz (2012) with negative two-day values
    # kept and the signed EDGE of Ardia, Guidotti & Kroencke (2024) are unbiased at a zero spread
    # (from memory); measured means -0.0002 and -0.000003 (daily volatility about 0.02; one month's
    # estimate has a standard deviation of about 0.004, so 1,000 draws give a standard error of
    # 0.00013). The floored monthly Abdi & Ranaldo (2017) estimator cannot be negative and is
    # biased up (measured 0.004).
    market = simulate_market(n_securities=20, n_months=2, half_spread=0.0, trades_per_day=100.0, seed=8)
    daily = daily_bars(market.trades.lazy(), "America/New_York")
    monthly = market.truth.select("security", "month", pl.lit(0.0).alias("effective_spread"))
    pool, _ = study.calibrate(daily, monthly)
    assert pool.get_column("spread").max() == 0.0
    result = study.run_study(
        pool, study={"draws": 1000, "seed": 3, "bins": 1, "measures": ["cs_spread", "edge_spread", "ar_spread_monthly"]},
        measures={"cs_spread": {"negative": "keep"}, "edge_spread": {"signed": True}},
    )
    overall = {r["estimator"]: r for r in result.overall.to_dicts()}
    assert overall["cs_spread"]["mean_truth"] == 0.0
    assert abs(overall["cs_spread"]["mean_estimate"]) < 0.0006
    assert abs(overall["edge_spread"]["mean_estimate"]) < 0.0006
    assert overall["ar_spread_monthly"]["mean_estimate"] > 0.002


# ---------------------------------------------------------------- regularities from the literature


def roll_undefined_share(ratio: float, n_returns: int, months: int, rng) -> float:
    """Share of months with a non-negative first-order autocovariance in Roll's (1984) daily model.

    dp_t = c (q_t - q_t-1) + u_t with q = +-1 equally likely, u ~ N(0, 1) (volatility 1,
    spread 2c = ratio), autocovariance with the full-sample mean and divisor n (as
    statsmodels' acovf). Plain numpy, independent of the project's simulator.
    """
    c = ratio / 2.0
    q = rng.choice([-1.0, 1.0], size=(months, n_returns + 1))
    dp = c * np.diff(q, axis=1) + rng.standard_normal((months, n_returns))
    d = dp - dp.mean(axis=1, keepdims=True)
    return float(((d[:, 1:] * d[:, :-1]).sum(axis=1) >= 0).mean())


def test_roll_undefined_share_rises_as_spread_falls_relative_to_volatility():
    # Roll (1984); Harris (1990) (from memory): with a small spread relative to volatility the
    # sample autocovariance is positive in a large share of months (the estimator is undefined),
    # approaching one half (a little less: the sample autocovariance is biased down) as the spread
    # vanishes, and rare when the spread dominates. Reference: the same share in Roll's daily model
    # simulated directly with numpy; the study must agree within 4 binomial standard errors.
    # Measured (study, reference) at spread / volatility 0, 0.5, 1, 1.5, 2.5: (0.386, 0.406),
    # (0.329, 0.322), (0.173, 0.176), (0.105, 0.081), (0.015, 0.024).
    ratios = [0.0, 0.5, 1.0, 1.5, 2.5]
    pool = paired([r * 0.02 for r in ratios], 0.02, 40.0)
    result = study.run_study(pool, study={"draws": 2500, "seed": 2, "measures": ["roll_spread"],
                                          "spread_vol_edges": [0.25, 0.75, 1.25, 2.0]})
    rows = by_bin(result, "roll_spread")
    shares = [r["missing_share"] for r in rows]
    rng = np.random.default_rng(1984)
    for ratio, row in zip(ratios, rows):
        expected = roll_undefined_share(ratio, 21, 40_000, rng)
        se = math.sqrt(expected * (1 - expected) / row["n"])
        assert abs(row["missing_share"] - expected) < 4 * se + 0.005, (ratio, row["missing_share"], expected)
    assert all(a > b for a, b in zip(shares, shares[1:]))
    assert 0.3 < shares[0] < 0.5 and shares[-1] < 0.03


def test_flooring_corwin_schultz_biases_the_average_up_when_spread_is_small_relative_to_volatility():
    # Corwin & Schultz (2012): setting negative two-day estimates to zero biases the monthly
    # average up when the spread is small relative to volatility. Same seed, same simulated
    # months, floored against kept, 30 trades a day. Measured (estimate - truth) / truth: floored
    # +3.6 and kept -2.3 at spread / volatility 0.07 (few trades a day bias the kept estimate down);
    # both -0.11 at spread / volatility 3.
    pool = paired([0.002, 0.03], [0.03, 0.01], 30.0)
    common = {"draws": 600, "seed": 4, "measures": ["cs_spread"], "spread_vol_edges": [0.5]}
    floored = by_bin(study.run_study(pool, study=common, measures={"cs_spread": {"negative": "zero"}}), "cs_spread")
    kept = by_bin(study.run_study(pool, study=common, measures={"cs_spread": {"negative": "keep"}}), "cs_spread")
    small, large = 0, 1
    assert floored[small]["relative_bias"] > 0.5
    effect_small = (floored[small]["mean_estimate"] - kept[small]["mean_estimate"]) / floored[small]["mean_truth"]
    effect_large = (floored[large]["mean_estimate"] - kept[large]["mean_estimate"]) / floored[large]["mean_truth"]
    assert effect_small > 1.0
    assert 0.0 <= effect_large < 0.05


def test_edge_stays_close_to_unbiased_as_trading_thins_where_high_low_does_not():
    # Ardia, Guidotti & Kroencke (2024): their efficient estimator stays close to unbiased when
    # trading is infrequent, while the high-low estimator of Corwin & Schultz (2012) is biased
    # down (the observed range misses the quotes). Spread 1%, daily volatility 1%. Measured
    # relative bias at 1.5 and 30 trades a day: EDGE -0.02 and -0.02; Corwin-Schultz -0.93 and -0.16.
    pool = conditions(0.01, 0.01, [1.5, 30.0])
    result = study.run_study(
        pool,
        study={"draws": 1000, "seed": 6, "measures": ["cs_spread", "edge_spread"], "intensity_edges": [5.0]},
        measures={"cs_spread": {"min_days": 5}, "edge_spread": {"min_days": 5}},
    )
    edge, cs = by_bin(result, "edge_spread", "by_intensity"), by_bin(result, "cs_spread", "by_intensity")
    thin, busy = 0, 1
    # bands: several times the measured -0.02 (and the paper's "close to unbiased")
    assert abs(edge[thin]["relative_bias"]) < 0.15 and abs(edge[busy]["relative_bias"]) < 0.1
    assert cs[thin]["relative_bias"] < -0.6
    assert cs[thin]["relative_bias"] < cs[busy]["relative_bias"] - 0.4
    assert edge[thin]["rmse"] < cs[thin]["rmse"]


# ---------------------------------------------------------------- outputs and settings


def test_tables_summary_and_heat_maps(small_study, tmp_path):
    _, _, _, result = small_study
    tables = {t.name: t for t in study.result_tables(result)}
    assert {"study_estimators", "study_ranking", "study_by_spread_vol", "study_by_intensity", "study_by_cell"} <= set(tables)
    ranked = tables["study_ranking"].frame.filter(pl.col("kind") == "spread")
    assert ranked.get_column("rmse").is_sorted()
    text = study.summary_text(result)
    assert f"lowest RMSE: among spread estimators {ranked.item(0, 'estimator')}" in text
    least = ranked.sort(pl.col("mean_bias").abs()).item(0, "estimator")
    assert f"smallest mean bias: {least} (" in text
    assert "400 simulated security-months" in text and "not advice" in text
    paths = study.bias_maps(result.by_cell, tmp_path, "rid123abc", min_cell=5)
    assert sorted(p.name for p in paths) == [
        "study_bias_spread.pdf", "study_bias_spread.png", "study_bias_volatility.pdf", "study_bias_volatility.png",
    ]
    from PIL import Image

    with Image.open(tmp_path / "study_bias_spread.png") as image:
        assert image.info.get("Description") == "liqpanel run rid123abc"
    assert b"liqpanel run rid123abc" in (tmp_path / "study_bias_spread.pdf").read_bytes()


def test_heat_map_panels_use_print_names_and_skip_estimators_without_estimates(small_study, tmp_path, monkeypatch):
    _, _, _, result = small_study
    spread = result.by_cell.filter(pl.col("kind") == "spread")
    names = spread.get_column("estimator").unique(maintain_order=True).to_list()
    empty, kept = names[0], names[1]
    by_cell = result.by_cell.with_columns(
        pl.when(pl.col("estimator") == empty).then(0).otherwise(pl.col("n_estimates")).alias("n_estimates")
    )
    assert study.unestimated(by_cell, "spread") == [empty]
    drawn = {}
    from liqpanel.report import figures

    def capture(panels, **kwargs):
        drawn[kwargs["stem"].name] = list(panels)
        return []

    monkeypatch.setattr(figures, "heat_maps", capture)
    study.bias_maps(by_cell, tmp_path, "rid", min_cell=5, labels={kept: "A printed name"})
    assert "A printed name" in drawn["study_bias_spread"] and kept not in drawn["study_bias_spread"]
    assert empty not in drawn["study_bias_spread"] and len(drawn["study_bias_spread"]) == len(names) - 1


def test_schema_defaults_and_bad_settings():
    schema = load_schema()["properties"]["study"]["properties"]
    assert {k: v["default"] for k, v in schema.items() if k != "in_report"} == study.DEFAULTS
    with pytest.raises(ConfigError, match="study.volatility: 'edge_spread' is a measure of the spread family"):
        study.check_settings({"volatility": "edge_spread"})
    with pytest.raises(ConfigError, match="study.fallback_spread: unknown measure 'edg_spread'"):
        study.check_settings({"fallback_spread": "edg_spread"})
    with pytest.raises(ConfigError, match="study.measures: 'amihud' is a measure of the impact family"):
        study.check_settings({"measures": ["amihud"]})
    with pytest.raises(ConfigError, match="study.intensity_edges: expected an increasing list"):
        study.check_settings({"intensity_edges": [5.0, 1.0]})
    with pytest.raises(ConfigError, match="no security-month to draw from"):
        study.run_study(conditions([], [], []))


def test_tick_sets_the_true_spread_and_the_market_profile_sets_the_session():
    # With a tick the quotes are rounded outwards, so at a zero half-spread the quoted spread is
    # one tick (common practice: the minimum quoted spread is one tick): ln(ask / bid) close to
    # tick / price. Draws at two price levels are simulated in separate price groups.
    # an invented two-session profile (the hours copy no exchange's)
    profile = {"timezone": "Asia/Tokyo", "sessions": [["08:50", "11:20"], ["12:20", "14:50"]], "tick_size": 0.01}
    market = study.Market.from_profile(profile, overnight_share=0.5)
    assert market.session == ("08:50", "14:50") and market.tick == 0.01 and market.timezone == "Asia/Tokyo"
    pool = paired(0.0, 0.02, 20.0).join(pl.DataFrame({"price": [5.0, 50.0]}), how="cross")
    conditions = study.draw_conditions(pool, 200, seed=9)
    daily, truth = study.simulate_draws(conditions, market, seed=9)
    joined = truth.join(conditions.select("security", "price"), on="security")
    for price in (5.0, 50.0):
        group = joined.filter(pl.col("price") == price)
        assert group.height > 50
        # the price wanders with 2% daily volatility over a month, so one tick is about tick / price
        # (measured 1.005 and 1.006 ticks)
        assert group.get_column("true_spread").mean() == pytest.approx(0.01 / price, rel=0.03)
    # trading-hours volatility: the efficient variance of the session, (1 - 0.5) of the day's
    assert (truth.get_column("true_vol_session") - 0.02 * math.sqrt(0.5)).abs().max() < 1e-15
    # every draw has its window of at most 21 days (the month) and one warm-up day before it
    window = daily.filter(pl.col("month") == study.WINDOW_MONTH)
    assert window.group_by("security").len().get_column("len").max() <= 21
    assert set(daily.get_column("month")) == {study.WINDOW_MONTH, study.WARM_UP_MONTH}
    assert daily.filter(pl.col("month") == study.WARM_UP_MONTH).get_column("date").max() < window.get_column("date").min()
