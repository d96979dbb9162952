"""Proxy validation (Goyenko, Holden & Trzcinka 2009 style): identities, scipy, simulation."""

from __future__ import annotations

import datetime as dt

import numpy as np
import polars as pl
import pytest
from scipy import stats

from liqpanel.core.errors import InputError
from liqpanel.models import validate_proxies


def _monthly(n_sec=60, n_months=24, seed=2) -> pl.DataFrame:
    """Benchmark effective spread with a market-wide time pattern and proxies built from it.

    ``same`` = benchmark; ``shifted`` = benchmark + 0.002; ``noisy`` =
    benchmark + N(0, 0.004^2); ``scaled`` = 1.5 * benchmark (biased, perfectly
    correlated).
    """
    rng = np.random.default_rng(seed)
    months = [dt.date(2015 + m // 12, m % 12 + 1, 1) for m in range(n_months)]
    level = 0.01 + 0.004 * np.sin(np.arange(n_months) / 3.0)
    bench = np.concatenate([lvl * rng.lognormal(0, 0.5, n_sec) for lvl in level])
    return pl.DataFrame(
        {
            "security": [f"V{i:03d}" for i in range(n_sec)] * n_months,
            "month": [m for m in months for _ in range(n_sec)],
            "effective_spread": bench,
            "same": bench,
            "shifted": bench + 0.002,
            "noisy": bench + rng.normal(0, 0.004, bench.size),
            "scaled": 1.5 * bench,
        }
    )


def test_identical_proxy_has_unit_correlation_and_no_error():
    out = validate_proxies(_monthly(), "effective_spread", ["same"]).row(0, named=True)
    # Identity: a proxy equal to the benchmark.
    assert out["mean_cs_pearson"] == pytest.approx(1.0, abs=1e-12)
    assert out["mean_cs_spearman"] == pytest.approx(1.0, abs=1e-12)
    assert out["ts_corr_market"] == pytest.approx(1.0, abs=1e-12)
    assert out["mean_bias"] == 0.0 and out["rmse"] == 0.0
    assert out["n_security_months"] == 60 * 24 and out["n_months"] == 24 and out["n_months_cs"] == 24


def test_shifted_and_scaled_proxies_give_the_known_bias():
    out = validate_proxies(_monthly(), "effective_spread", ["shifted", "scaled"])
    shifted, scaled = out.row(0, named=True), out.row(1, named=True)
    # Identity: proxy = benchmark + 0.002 -> bias 0.002, RMSE 0.002, correlations 1.
    assert shifted["mean_bias"] == pytest.approx(0.002, abs=1e-15)
    assert shifted["rmse"] == pytest.approx(0.002, abs=1e-15)
    assert shifted["mean_cs_pearson"] == pytest.approx(1.0, abs=1e-12)
    assert shifted["mean_cs_spearman"] == pytest.approx(1.0, abs=1e-12)
    # Identity: proxy = 1.5 * benchmark -> bias 0.5 * mean(benchmark), RMSE 0.5 * rms(benchmark).
    bench = _monthly().get_column("effective_spread").to_numpy()
    assert scaled["mean_bias"] == pytest.approx(0.5 * bench.mean(), rel=1e-12)
    assert scaled["rmse"] == pytest.approx(0.5 * np.sqrt(np.mean(bench**2)), rel=1e-12)
    assert scaled["mean_cs_spearman"] == pytest.approx(1.0, abs=1e-12)
    assert out.get_column("proxy").to_list() == ["shifted", "scaled"]


def test_noisy_proxy_matches_scipy_and_numpy():
    monthly = _monthly(seed=6)
    # Drop some values to check pairing on complete security-months only.
    holed = monthly.with_columns(
        pl.when(pl.int_range(pl.len()) % 13 == 0).then(None).otherwise(pl.col("noisy")).alias("noisy")
    )
    out = validate_proxies(holed, "effective_spread", ["noisy"]).row(0, named=True)
    complete = holed.drop_nulls(["noisy"]).sort("month")
    pearson, spearman, mean_p, mean_b = [], [], [], []
    for (_,), block in complete.group_by("month", maintain_order=True):
        p, b = block.get_column("noisy").to_numpy(), block.get_column("effective_spread").to_numpy()
        pearson.append(stats.pearsonr(p, b).statistic)  # scipy.stats.pearsonr
        spearman.append(stats.spearmanr(p, b).statistic)  # scipy.stats.spearmanr
        mean_p.append(p.mean())
        mean_b.append(b.mean())
    assert out["mean_cs_pearson"] == pytest.approx(np.mean(pearson), rel=1e-10)
    assert out["mean_cs_spearman"] == pytest.approx(np.mean(spearman), rel=1e-10)
    assert out["ts_corr_market"] == pytest.approx(np.corrcoef(mean_p, mean_b)[0, 1], rel=1e-10)
    diff = complete.get_column("noisy").to_numpy() - complete.get_column("effective_spread").to_numpy()
    assert out["mean_bias"] == pytest.approx(diff.mean(), rel=1e-10)
    assert out["rmse"] == pytest.approx(np.sqrt(np.mean(diff**2)), rel=1e-10)
    assert out["n_security_months"] == complete.height


def test_noisy_proxy_recovers_known_error_size():
    out = validate_proxies(_monthly(n_sec=400, seed=8), "effective_spread", ["noisy"]).row(0, named=True)
    # Simulation truth: proxy error N(0, 0.004^2) -> RMSE ~ 0.004, bias ~ 0
    # (se of the bias = 0.004 / sqrt(9600) ~ 4e-5).
    assert out["rmse"] == pytest.approx(0.004, rel=0.03)
    assert abs(out["mean_bias"]) < 2e-4
    # Derived correlations (this test's own simulation): in month m the
    # benchmark is level_m x LogNormal(0, 0.5), cross-sectional sd
    # sd_m = level_m sqrt((e^0.25 - 1) e^0.25) = 0.604 level_m; adding
    # independent N(0, 0.004^2) noise gives Pearson rho_m = sd_m / sqrt(sd_m^2 + 0.004^2)
    # (the attenuation of a correlation by measurement error, common practice);
    # the mean over the 24 months is 0.8252 (measured 0.8252 at this seed; over
    # seeds 1-5 the measured values lie within 0.007 of it, so the band 0.02 is
    # about three times the seed-to-seed spread).
    level = 0.01 + 0.004 * np.sin(np.arange(24) / 3.0)
    sd_m = level * np.sqrt((np.exp(0.25) - 1) * np.exp(0.25))
    assert out["mean_cs_pearson"] == pytest.approx(np.mean(sd_m / np.sqrt(sd_m**2 + 0.004**2)), abs=0.02)
    # The market-wide series: the monthly means share the benchmark exactly,
    # and the noise of a mean over 400 securities has sd 0.004 / 20 = 0.0002,
    # so rho = sd(means) / sqrt(sd(means)^2 + 0.0002^2) = 0.9980 with the
    # means' sd taken as e^0.125 x sd(level) (measured 0.9970; seeds 1-5 within 0.0006).
    sd_means = np.std(level * np.exp(0.125), ddof=1)
    assert out["ts_corr_market"] == pytest.approx(sd_means / np.sqrt(sd_means**2 + 0.0002**2), abs=0.003)


def test_thin_months_are_left_out_of_cross_sectional_correlations():
    monthly = _monthly(n_sec=5, n_months=3).with_columns(
        pl.when((pl.col("month") == dt.date(2015, 1, 1)) & (pl.col("security") != "V000")
                & (pl.col("security") != "V001"))
        .then(None).otherwise(pl.col("noisy")).alias("noisy")
    )
    out = validate_proxies(monthly, "effective_spread", ["noisy"]).row(0, named=True)
    # January keeps 2 pairs (< 3): no correlation that month, but it counts for bias/RMSE.
    assert out["n_months_cs"] == 2 and out["n_months"] == 3 and out["n_security_months"] == 12


def test_validation_errors_name_the_column():
    with pytest.raises(InputError, match="'roll_spread'"):
        validate_proxies(_monthly(n_sec=5, n_months=2), "effective_spread", ["roll_spread"])
    with pytest.raises(ValueError, match="also listed as a proxy"):
        validate_proxies(_monthly(n_sec=5, n_months=2), "effective_spread", ["effective_spread"])
