"""Liquidity-adjusted CAPM (Acharya & Pedersen 2005).

Checks: the normalisation's scaling and cap on hand-made values (the
paper's 0.25 + 0.30 ILLIQ P_t-1 capped at 30, from memory); the AR(2)
innovations against statsmodels' AutoReg and OLS; the four betas against
their covariance definitions computed with numpy and recovered from
series simulated here with planted betas; the Fama-MacBeth step against
linearmodels' FamaMacBeth.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import polars as pl
import pytest
import statsmodels.api as sm
from linearmodels.panel import FamaMacBeth
from statsmodels.tsa.ar_model import AutoReg

from liqpanel.factors import acharya_pedersen as ap

MONTHS = pl.date_range(dt.date(2001, 1, 1), dt.date(2020, 12, 1), "1mo", eager=True).to_list()


def test_normalisation_scaling_and_cap_by_hand():
    # Two securities over three months. Market capitalisation: 100 + 100 = 200 at the
    # end of month 1, 300 + 100 = 400 at the end of month 2, so P = 1 for month 2 and
    # P = 400 / 200 = 2 for month 3 (Acharya & Pedersen 2005: P_t-1 relative to the first month).
    panel = pl.DataFrame({
        "security": ["A", "A", "A", "B", "B", "B"],
        "month": [MONTHS[0], MONTHS[1], MONTHS[2]] * 2,
        "amihud": [9.0, 2.0, 2.0, 9.0, 100.0, 60.0],
        "market_cap": [100.0, 300.0, 300.0, 100.0, 100.0, 100.0],
    }).sort("security", "month")
    norm = ap.normalised_illiquidity(panel)
    got = {(r["security"], r["month"]): r for r in norm.iter_rows(named=True)}
    # month 1 has no P_t-1: no row
    assert (("A", MONTHS[0]) not in got) and (("B", MONTHS[0]) not in got)
    # A, month 2: 0.25 + 0.30 * 2 * 1 = 0.85; month 3: 0.25 + 0.30 * 2 * 2 = 1.45
    assert got[("A", MONTHS[1])]["illiq_norm"] == pytest.approx(0.85, abs=1e-12)
    assert got[("A", MONTHS[2])]["illiq_norm"] == pytest.approx(1.45, abs=1e-12)
    # B, month 2: 0.25 + 0.30 * 100 = 30.25 -> capped at 30; month 3: 0.25 + 0.30 * 60 * 2 = 36.25 -> 30
    assert got[("B", MONTHS[1])]["illiq_norm"] == 30.0
    assert got[("B", MONTHS[2])]["illiq_norm"] == 30.0
    # the truncated ILLIQ is where c reaches the cap: (30 - 0.25) / (0.30 P)
    assert got[("B", MONTHS[1])]["illiq_trunc"] == pytest.approx(29.75 / 0.30, abs=1e-12)
    assert got[("B", MONTHS[2])]["illiq_trunc"] == pytest.approx(29.75 / 0.60, abs=1e-12)
    assert got[("A", MONTHS[2])]["illiq_trunc"] == 2.0
    # weights: market value at the end of the month before
    assert got[("A", MONTHS[2])]["weight"] == 300.0
    assert got[("A", MONTHS[1])]["market_ratio"] == 1.0 and got[("A", MONTHS[2])]["market_ratio"] == 2.0


def test_return_innovations_equal_autoreg():
    rng = np.random.default_rng(8)
    r = np.zeros(80)
    for t in range(2, 80):
        r[t] = 0.005 + 0.2 * r[t - 1] - 0.1 * r[t - 2] + rng.normal(0, 0.04)
    out = ap.return_innovations(pl.DataFrame({"month": MONTHS[:80], "ret": r}))
    ref = AutoReg(r, lags=2, trend="c").fit()  # statsmodels AutoReg, the reference
    np.testing.assert_allclose(out.get_column("r_innovation").to_numpy()[2:], ref.resid, rtol=0, atol=1e-10)
    assert out.get_column("r_innovation").head(2).is_null().all()


def test_illiquidity_innovations_equal_ols_with_fixed_ratio():
    # The AR(2) keeps P_t-1 in every term (Acharya & Pedersen 2005, from memory):
    # y_t = 0.25 + 0.30 I_t P_t-1 on x1 = 0.25 + 0.30 I_t-1 P_t-1, x2 = 0.25 + 0.30 I_t-2 P_t-1.
    rng = np.random.default_rng(9)
    n = 60
    illiq = np.abs(1.0 + np.cumsum(rng.normal(0, 0.1, n)))
    ratio = np.exp(np.cumsum(rng.normal(0.005, 0.03, n)))
    out = ap.illiquidity_innovations(pl.DataFrame({"month": MONTHS[:n], "illiq_trunc": illiq, "market_ratio": ratio}))
    y = 0.25 + 0.30 * illiq[2:] * ratio[2:]
    x = np.column_stack([0.25 + 0.30 * illiq[1:-1] * ratio[2:], 0.25 + 0.30 * illiq[:-2] * ratio[2:]])
    ref = sm.OLS(y, sm.add_constant(x)).fit()
    np.testing.assert_allclose(out.get_column("c_innovation").to_numpy()[2:], ref.resid, rtol=0, atol=1e-10)
    # orthogonality of OLS residuals to the regressors (identity)
    assert abs(float(x[:, 0] @ ref.resid)) < 1e-10


def test_betas_match_their_definitions_and_recover_planted_values():
    # Simulated innovations with planted betas: r_p = b1 rM + b3' cM + e, c_p = b2' cM + b4' rM + e'.
    rng = np.random.default_rng(10)
    n = 4000
    rm = rng.normal(0, 0.045, n)
    cm = rng.normal(0, 0.002, n)  # decimal
    b = {"r_rm": 1.2, "r_cm": -2.0, "c_cm": 0.8, "c_rm": -0.01}
    rp = b["r_rm"] * rm + b["r_cm"] * cm + rng.normal(0, 0.02, n)
    cp = b["c_cm"] * cm + b["c_rm"] * rm + rng.normal(0, 0.001, n)
    months = pl.date_range(dt.date(1700, 1, 1), dt.date(2100, 1, 1), "1mo", eager=True).head(n)
    portfolio = pl.DataFrame({"portfolio": [1] * n, "month": months, "ret": rp, "c_innovation": cp * 100})
    market = pl.DataFrame({"month": months, "r_innovation": rm, "c_innovation": cm * 100})
    got = ap.ap_betas(portfolio, market).row(0, named=True)
    d = np.var(rm - cm, ddof=1)
    expected = {"beta1": np.cov(rp, rm)[0, 1] / d, "beta2": np.cov(cp, cm)[0, 1] / d,
                "beta3": np.cov(rp, cm)[0, 1] / d, "beta4": np.cov(cp, rm)[0, 1] / d}
    for k, v in expected.items():
        assert got[k] == pytest.approx(v, rel=1e-10)
    assert got["beta_net"] == pytest.approx(expected["beta1"] + expected["beta2"] - expected["beta3"] - expected["beta4"], rel=1e-10)
    # planted values: var(rM - cM) = 0.045^2 + 0.002^2; beta1 -> 1.2 var(rM)/D, beta3 -> -2.0 var(cM)/D
    d_true = 0.045**2 + 0.002**2
    assert got["beta1"] == pytest.approx(1.2 * 0.045**2 / d_true, abs=4 * 0.02 / (0.045 * np.sqrt(n)))
    assert got["beta2"] == pytest.approx(0.8 * 0.002**2 / d_true, abs=4 * 0.001 * 0.002 / d_true / np.sqrt(n))


def test_fama_macbeth_step_equals_linearmodels():
    rng = np.random.default_rng(12)
    n_port, n_months = 10, 36
    betas = pl.DataFrame({"portfolio": range(1, n_port + 1), "beta1": rng.uniform(0.6, 1.4, n_port),
                          "beta_net": rng.uniform(0.6, 1.4, n_port)})
    cs = pl.DataFrame({
        "security": np.repeat([f"P{p:02d}" for p in range(1, n_port + 1)], n_months),
        "portfolio": np.repeat(np.arange(1, n_port + 1), n_months),
        "month": MONTHS[:n_months] * n_port,
        "exp_illiq": rng.uniform(0.0025, 0.02, n_port * n_months),
        "ret_next": rng.normal(0.01, 0.05, n_port * n_months),
    }).join(betas, on="portfolio")
    long, lags = ap.cross_section_tests(cs, lags=3)
    frame = cs.to_pandas().set_index(["security", "month"])
    frame.index = frame.index.set_levels(pd.to_datetime(frame.index.levels[1]), level=1)
    for model, beta in (("capm_beta", "beta1"), ("net_beta", "beta_net")):
        x = sm.add_constant(frame[["exp_illiq", beta]])
        ref = FamaMacBeth(frame["ret_next"], x).fit(cov_type="kernel", kernel="bartlett", bandwidth=3)
        mine = long.filter(pl.col("model") == model)
        for name, ours in (("const", "intercept"), ("exp_illiq", "exp_illiq"), (beta, beta)):
            row = mine.filter(pl.col("variable") == ours).row(0, named=True)
            assert row["coef"] == pytest.approx(ref.params[name], abs=1e-10)
            assert row["std_error"] == pytest.approx(ref.std_errors[name], rel=1e-8)
