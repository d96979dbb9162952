"""Market liquidity and its innovations (Pastor & Stambaugh 2003).

Checks: hand-worked scaled changes (the paper's formula, from memory),
the AR innovations against statsmodels' OLS and AutoReg residuals, the
orthogonality of OLS residuals to their regressors (an identity), and
recovery of a planted aggregate liquidity process from noisy
security-level gammas (simulated here, with the truth known).
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import polars as pl
import pytest
import statsmodels.api as sm
from statsmodels.tsa.ar_model import AutoReg

from liqpanel.core.errors import InputError
from liqpanel.factors.aggregate import (
    INNOVATION_SCALE, aggregate_liquidity, innovation_coefficients, liquidity_innovations,
)


def _months(n: int, start: dt.date = dt.date(2001, 1, 1)) -> list[dt.date]:
    return pl.date_range(start, dt.date(2100, 1, 1), "1mo", eager=True).head(n).to_list()


def _hand_panel() -> pl.DataFrame:
    """Three months; A in all, B in months 1-2, C in months 2-3.

    gamma:      A: 0.10, 0.30, 0.20;  B: 0.50, 0.40, -;  C: -, 0.60, 1.00
    market cap: A: 100, 110, 120;     B: 300, 330, -;    C: -, 200, 220
    """
    m = _months(3)
    return pl.DataFrame({
        "security": ["A", "A", "A", "B", "B", "C", "C"],
        "month": [m[0], m[1], m[2], m[0], m[1], m[1], m[2]],
        "ps_gamma": [0.10, 0.30, 0.20, 0.50, 0.40, 0.60, 1.00],
        "market_cap": [100.0, 110.0, 120.0, 300.0, 330.0, 200.0, 220.0],
    })


def test_scaled_change_by_hand():
    # Pastor & Stambaugh (2003), eq. for Delta gamma_t (from memory): securities in
    # both months, mean change scaled by m_t/m_1, m_t the market value at t-1.
    agg = aggregate_liquidity(_hand_panel())
    assert agg.get_column("n_securities").to_list() == [2, 2]
    # month 2: A (0.30-0.10), B (0.40-0.50); m_2 = 100 + 300 = 400 = m_1
    # month 3: A (0.20-0.30), C (1.00-0.60); m_3 = 110 + 200 = 310
    assert agg.get_column("scale").to_list() == pytest.approx([1.0, 310 / 400], abs=1e-15)
    assert agg.get_column("change").to_list() == pytest.approx([(0.2 - 0.1) / 2, 310 / 400 * (-0.1 + 0.4) / 2], abs=1e-15)
    assert agg.get_column("level").to_list() == pytest.approx([(0.3 + 0.4) / 2, 310 / 400 * (0.2 + 1.0) / 2], abs=1e-15)


def test_unscaled_without_size():
    agg = aggregate_liquidity(_hand_panel(), size=None)
    assert agg.get_column("scale").to_list() == [1.0, 1.0]
    assert agg.get_column("change").to_list() == pytest.approx([0.05, 0.15], abs=1e-15)


def test_missing_column_is_named():
    with pytest.raises(InputError, match="ps_gamma"):
        aggregate_liquidity(_hand_panel().drop("ps_gamma"))


def _planted(n_sec: int = 400, n_months: int = 120, noise: float = 0.05, seed: int = 7):
    """Gammas around a planted market level G_t whose change follows the paper's AR form.

    Delta G_t = a + b Delta G_t-1 + c G_t-1 + u_t, u_t ~ N(0, 1) (values chosen
    for a stationary, visibly moving series); gamma_i,t = G_t + e_i,t, e ~ N(0, noise^2);
    market values constant, so m_t / m_1 = 1.
    """
    rng = np.random.default_rng(seed)
    a, b, c = 0.1, 0.2, -0.3
    level, change = np.zeros(n_months), np.zeros(n_months)
    u = rng.normal(0.0, 1.0, n_months)
    for t in range(1, n_months):
        change[t] = a + b * change[t - 1] + c * level[t - 1] + u[t]
        level[t] = level[t - 1] + change[t]
    months = _months(n_months)
    gamma = level[None, :] + rng.normal(0.0, noise, (n_sec, n_months))
    panel = pl.DataFrame({
        "security": np.repeat([f"S{i:03d}" for i in range(n_sec)], n_months),
        "month": months * n_sec,
        "ps_gamma": gamma.ravel(),
        "market_cap": np.full(n_sec * n_months, 1e9),
    })
    truth = pl.DataFrame({"month": months, "true_level": level, "true_change": change, "true_u": u})
    return panel, truth


def test_planted_change_is_recovered():
    noise, n_sec = 0.05, 400
    panel, truth = _planted(n_sec=n_sec, noise=noise)
    agg = aggregate_liquidity(panel).join(truth, on="month")
    # The estimated change is Delta G_t plus the mean of N differences of
    # independent noise: sd = noise * sqrt(2 / N). Five sd bound every month.
    bound = 5 * noise * np.sqrt(2 / n_sec)
    err = (agg.get_column("change") - agg.get_column("true_change")).abs().max()
    assert err < bound


def test_planted_innovations_are_recovered():
    panel, truth = _planted()
    inn = liquidity_innovations(aggregate_liquidity(panel)).join(truth, on="month").drop_nulls("innovation")
    diff = inn.get_column("innovation") - inn.get_column("true_u") / INNOVATION_SCALE
    # With regressors measured without error, u_hat - u = -P_X u, and
    # E||P_X u||^2 = k sigma^2 (k = 3 coefficients): the RMS difference is about
    # sigma * sqrt(k / T) = sqrt(3/118) = 0.16 sigma; the measurement noise
    # (sd 0.0035) is small beside it. Bound: 0.25 sigma, sigma = 1 / 100.
    rmse = float(np.sqrt((diff**2).mean()))
    assert rmse < 0.25 / INNOVATION_SCALE
    assert rmse > 0  # estimated, not copied
    coef = innovation_coefficients(aggregate_liquidity(panel))
    # coefficients within 4 standard errors of the planted (0.1, 0.2, -0.3); se from statsmodels below
    frame = inn.select("change", pl.col("change").shift(1).alias("cl"), pl.col("level").shift(1).alias("ll")).drop_nulls()
    fit = sm.OLS(frame.get_column("change").to_numpy(), sm.add_constant(frame.select("cl", "ll").to_numpy())).fit()
    assert np.all(np.abs(coef - np.array([0.1, 0.2, -0.3])) < 4 * fit.bse)


def _regression_frame(agg: pl.DataFrame) -> pl.DataFrame:
    return agg.sort("month").select(
        "month", "change", pl.col("change").shift(1).alias("change_lag"), pl.col("level").shift(1).alias("level_lag"),
    ).drop_nulls()


def test_innovations_equal_statsmodels_ols_and_autoreg():
    panel, _ = _planted(n_sec=50, n_months=60, seed=11)
    agg = aggregate_liquidity(panel)
    inn = liquidity_innovations(agg).drop_nulls("innovation").sort("month")
    frame = _regression_frame(agg)
    x = sm.add_constant(frame.select("change_lag", "level_lag").to_numpy())
    ols = sm.OLS(frame.get_column("change").to_numpy(), x).fit()  # statsmodels OLS, the reference
    np.testing.assert_allclose(inn.get_column("u").to_numpy(), ols.resid, rtol=0, atol=1e-10)
    np.testing.assert_allclose(inn.get_column("innovation").to_numpy(), ols.resid / 100, rtol=0, atol=1e-12)
    # the same regression as statsmodels' AutoReg: one own lag, a constant, the lagged level as
    # exogenous (AutoReg drops the first row, whose lagged level is filled only to keep alignment)
    full = agg.sort("month").with_columns(pl.col("level").shift(1).fill_null(0.0).alias("level_lag"))
    ar = AutoReg(full.get_column("change").to_numpy(), lags=1, trend="c",
                 exog=full.get_column("level_lag").to_numpy()).fit()
    np.testing.assert_allclose(inn.get_column("u").to_numpy(), ar.resid, rtol=0, atol=1e-10)


def test_innovations_are_orthogonal_to_their_regressors():
    # OLS normal equations (an identity): X'u = 0 for every regressor, the constant included.
    panel, _ = _planted(n_sec=30, n_months=48, seed=3)
    agg = aggregate_liquidity(panel)
    u = liquidity_innovations(agg).drop_nulls("u").sort("month").get_column("u").to_numpy()
    frame = _regression_frame(agg)
    for column in (np.ones(len(u)), frame.get_column("change_lag").to_numpy(), frame.get_column("level_lag").to_numpy()):
        assert abs(float(column @ u)) < 1e-10 * max(1.0, float(np.abs(column).sum()))


def test_gap_in_months_gives_no_innovation_across_it():
    panel, _ = _planted(n_sec=20, n_months=30, seed=5)
    gap = _months(30)[15]
    agg = aggregate_liquidity(panel.filter(pl.col("month") != gap))
    inn = liquidity_innovations(agg)
    after = _months(30)[16]
    # month 16 has no predecessor in the panel, so no change; month 17 no lagged change
    assert after not in agg.get_column("month").to_list()
    assert inn.filter(pl.col("month") == _months(30)[17]).get_column("innovation").is_null().all()
