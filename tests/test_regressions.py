"""Panel regressions: checked against published values, statsmodels and numpy.

Sources named beside each check. Data: the Grunfeld investment panel shipped
by statsmodels, the portfolio returns shipped in ``linearmodels.datasets.french``,
and simulated panels with known coefficients.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import polars as pl
import pytest
import statsmodels.api as sm
from scipy import stats

from liqpanel.core.errors import ConfigError, InputError
from liqpanel.models import ModelResult, ModelSpec, automatic_lags, fit_model, newey_west_mean, regression_table

# --------------------------------------------------------------------------- data


@pytest.fixture(scope="module")
def grunfeld() -> pl.DataFrame:
    """Grunfeld (1950) investment panel as shipped by statsmodels.

    The statsmodels file has 11 firms; the textbook panel (Baltagi, Econometric
    Analysis of Panel Data, Grunfeld table) uses the first 10 in file order,
    20 years each. Firms are relabelled firm_01..firm_10; the year becomes the
    ``month`` key (1 January of the year), ``invest`` plays the dependent.
    """
    from statsmodels.datasets import grunfeld as source

    raw = pl.from_pandas(source.load_pandas().data)
    firms = raw.get_column("firm").unique(maintain_order=True).to_list()[:10]
    labels = pl.DataFrame({"firm": firms, "security": [f"firm_{i + 1:02d}" for i in range(10)]})
    return (
        raw.join(labels, on="firm", how="inner")
        .select(
            "security",
            pl.date(pl.col("year").cast(pl.Int32), 1, 1).alias("month"),
            pl.col("invest").alias("ret_next"),
            "value",
            "capital",
        )
        .sort("security", "month")
    )


@pytest.fixture(scope="module")
def portfolio_panel() -> pl.DataFrame:
    """Portfolios x months panel from ``linearmodels.datasets.french``.

    The 30 portfolio series (12 industries, 18 size/value and size/momentum
    portfolios) are relabelled port_01..port_30. Excess return = return - RF.
    Characteristics known at the end of month t: ``past_ret_1m`` (excess
    return of month t) and ``past_ret_12m`` (mean excess return over months
    t-11..t); ``ret_next`` is the excess return of month t+1.
    """
    from linearmodels.datasets import french

    raw = pl.from_pandas(french.load())
    non_portfolio = {"dates", "MktRF", "SMB", "HML", "Mom", "RF"}
    series = [c for c in raw.columns if c not in non_portfolio]
    labels = {c: f"port_{i + 1:02d}" for i, c in enumerate(series)}
    long = (
        raw.rename(labels)
        .with_columns(pl.col("dates").cast(pl.Date).alias("month"))
        .unpivot(index=["month", "RF"], on=list(labels.values()), variable_name="security", value_name="ret")
        .with_columns((pl.col("ret") - pl.col("RF")).alias("excess"))
        .sort("security", "month")
    )
    return long.select(
        "security",
        "month",
        pl.col("excess").shift(-1).over("security").alias("ret_next"),
        pl.col("excess").alias("past_ret_1m"),
        pl.col("excess").rolling_mean(12).over("security").alias("past_ret_12m"),
    )


def _simulated_panel(n_sec: int = 150, n_months: int = 48, seed: int = 7, loading: float = 0.8) -> pl.DataFrame:
    """Panel with known slopes: y = 0.02 + 0.5 x1 - 0.3 x2 + a_i + g_t + e.

    x1 = loading * a_i + noise: with loading > 0 the security effects a_i are
    correlated with x1 (pooled OLS and cross-sectional regressions are biased,
    the within estimator is not); month effects g_t are common shocks.
    """
    rng = np.random.default_rng(seed)
    a = rng.normal(0, 1, n_sec)
    g = rng.normal(0, 0.5, n_months)
    sec = np.repeat(np.arange(n_sec), n_months)
    mon = np.tile(np.arange(n_months), n_sec)
    x1 = loading * a[sec] + rng.normal(0, 1, sec.size)
    x2 = rng.normal(0, 1, sec.size)
    y = 0.02 + 0.5 * x1 - 0.3 * x2 + a[sec] + g[mon] + rng.normal(0, 1, sec.size)
    months = [dt.date(2001 + m // 12, m % 12 + 1, 1) for m in range(n_months)]
    return pl.DataFrame(
        {
            "security": [f"SIM{i:04d}" for i in sec],
            "month": [months[m] for m in mon],
            "ret_next": y,
            "amihud": x1,
            "log_size": x2,
        }
    )


def _codes(frame: pl.DataFrame, column: str) -> np.ndarray:
    return np.unique(frame.get_column(column).to_numpy(), return_inverse=True)[1]


# ---------------------------------------------------------------- Fama-MacBeth


def _per_month_ols(panel: pl.DataFrame, regressors: list[str]) -> tuple[np.ndarray, np.ndarray]:
    """Independent Fama & MacBeth (1973) first pass: numpy lstsq month by month."""
    complete = panel.drop_nulls(["ret_next", *regressors]).sort("month", "security")
    slopes, r2 = [], []
    for _, block in complete.group_by("month", maintain_order=True):
        y = block.get_column("ret_next").to_numpy()
        x = np.column_stack([np.ones(block.height), block.select(regressors).to_numpy()])
        b, *_ = np.linalg.lstsq(x, y, rcond=None)
        e = y - x @ b
        slopes.append(b)
        r2.append(1 - (e @ e) / ((y - y.mean()) @ (y - y.mean())))
    return np.array(slopes), np.array(r2)


def test_fama_macbeth_equals_per_month_ols_with_statsmodels_newey_west(portfolio_panel):
    regressors = ["past_ret_1m", "past_ret_12m"]
    spec = ModelSpec("fm", regressors=tuple(regressors), lags=6)
    res = fit_model(portfolio_panel, spec)
    slopes, r2 = _per_month_ols(portfolio_panel, regressors)
    names = ["intercept", *regressors]

    # Fama & MacBeth (1973): estimate = time-series mean of the monthly slopes.
    np.testing.assert_allclose([res.params[n] for n in names], slopes.mean(axis=0), rtol=1e-10, atol=1e-14)
    # Newey & West (1987) on the slope series: statsmodels OLS on a constant,
    # HAC with Bartlett weights, maxlags=6, small-sample factor T/(T-1).
    for j, n in enumerate(names):
        hac = sm.OLS(slopes[:, j], np.ones(len(slopes))).fit(
            cov_type="HAC", cov_kwds={"maxlags": 6, "use_correction": True}
        )
        assert res.std_errors[n] == pytest.approx(hac.bse[0], rel=1e-9)
        assert res.tstats[n] == pytest.approx(hac.params[0] / hac.bse[0], rel=1e-9)
    assert res.n_months == len(slopes) == 807  # Dec 1949 (12 months of history) .. Feb 2017 (last t+1 return)
    assert res.nobs == 30 * 807
    assert res.n_securities == 30
    assert res.nobs_dropped == portfolio_panel.height - 30 * 807
    assert res.r2 == pytest.approx(r2.mean(), rel=1e-10)
    assert res.lags == 6


def test_fama_macbeth_plain_is_standard_error_of_the_mean(portfolio_panel):
    # Fama & MacBeth (1973): se = sd(b_t) / sqrt(T); scipy.stats.sem.
    res = fit_model(portfolio_panel, ModelSpec("fm", regressors=("past_ret_1m",), covariance="plain"))
    slopes, _ = _per_month_ols(portfolio_panel, ["past_ret_1m"])
    assert res.std_errors["past_ret_1m"] == pytest.approx(stats.sem(slopes[:, 1]), rel=1e-9)
    # p-value from t with T-1 degrees of freedom (Fama & MacBeth 1973 convention)
    t = res.tstats["past_ret_1m"]
    assert res.pvalues["past_ret_1m"] == pytest.approx(2 * stats.t.sf(abs(t), len(slopes) - 1), rel=1e-8)


def test_fama_macbeth_automatic_lags_follow_newey_west_1994_rule(portfolio_panel):
    res = fit_model(portfolio_panel, ModelSpec("fm", regressors=("past_ret_1m",), lags=None))
    # floor(4 * (T/100)^(2/9)) with T = 807: Newey & West (1994) rule of thumb
    assert res.lags == automatic_lags(807) == int(np.floor(4 * (807 / 100) ** (2 / 9))) == 6
    assert automatic_lags(60) == 3  # floor(4 * 0.6^(2/9)) = floor(3.57)


def test_fama_macbeth_recovers_known_slopes():
    panel = _simulated_panel(seed=11, loading=0.0)
    res = fit_model(panel, ModelSpec("fm", regressors=("amihud", "log_size"), lags=3))
    # Simulation truth: slopes 0.5 and -0.3; security effects uncorrelated with the
    # regressors, month effects fall into each month's intercept.
    assert abs(res.params["amihud"] - 0.5) < 4 * res.std_errors["amihud"]
    assert abs(res.params["log_size"] + 0.3) < 4 * res.std_errors["log_size"]
    assert res.params["amihud"] == pytest.approx(0.5, abs=0.08)
    assert res.params["log_size"] == pytest.approx(-0.3, abs=0.05)


# ------------------------------------------------------------ Grunfeld (Baltagi)


def test_grunfeld_within_estimates_match_baltagi(grunfeld):
    spec = ModelSpec("fe", dependent="ret_next", regressors=("value", "capital"), estimator="fixed_effects",
                     effects=("security",), covariance="plain")
    res = fit_model(grunfeld, spec)
    # Baltagi, Econometric Analysis of Panel Data, Grunfeld table, within
    # estimator (from memory): value 0.1101 (se 0.0119), capital 0.3101 (se 0.0174).
    assert float(f"{res.params['value']:.3g}") == 0.110
    assert float(f"{res.params['capital']:.3g}") == 0.310
    assert res.params["value"] == pytest.approx(0.1101, abs=5e-5)
    assert res.params["capital"] == pytest.approx(0.3101, abs=5e-5)
    assert res.std_errors["value"] == pytest.approx(0.0119, abs=5e-5)
    assert res.std_errors["capital"] == pytest.approx(0.0174, abs=5e-5)
    assert "intercept" not in res.params
    assert (res.nobs, res.n_securities, res.n_months) == (200, 10, 20)


def test_grunfeld_two_way_and_pooled_match_baltagi(grunfeld):
    two_way = fit_model(grunfeld, ModelSpec("fe2", regressors=("value", "capital"), estimator="fixed_effects",
                                            effects=("security", "month"), covariance="plain"))
    # Baltagi, two-way within estimator on Grunfeld (from memory): 0.1177, 0.3579.
    assert two_way.params["value"] == pytest.approx(0.1177, abs=5e-5)
    assert two_way.params["capital"] == pytest.approx(0.3579, abs=5e-5)
    pooled = fit_model(grunfeld, ModelSpec("ols", regressors=("value", "capital"), estimator="pooled",
                                           covariance="plain"))
    # Baltagi, pooled OLS on Grunfeld (from memory): -42.714, 0.1156, 0.2307.
    assert pooled.params["intercept"] == pytest.approx(-42.714, abs=5e-4)
    assert pooled.params["value"] == pytest.approx(0.1156, abs=5e-5)
    assert pooled.params["capital"] == pytest.approx(0.2307, abs=5e-5)


# ------------------------------------------------------------ clustered errors


@pytest.mark.parametrize("cluster", [("security",), ("month",), ("security", "month")])
def test_clustered_standard_errors_match_statsmodels(grunfeld, cluster):
    res = fit_model(grunfeld, ModelSpec("p", regressors=("value", "capital"), estimator="pooled", cluster=cluster))
    x = sm.add_constant(grunfeld.select("value", "capital").to_numpy())
    y = grunfeld.get_column("ret_next").to_numpy()
    codes = {"security": _codes(grunfeld, "security"), "month": _codes(grunfeld, "month")}
    groups = codes[cluster[0]] if len(cluster) == 1 else np.column_stack([codes["security"], codes["month"]])
    # statsmodels cov_type="cluster" (Petersen 2009; two-way: Cameron, Gelbach &
    # Miller 2011, V1 + V2 - V12). linearmodels and statsmodels both apply G/(G-1) * (N-1)/(N-k)
    # to each one-way piece, so no correction difference remains.
    ref = sm.OLS(y, x).fit(cov_type="cluster", cov_kwds={"groups": groups})
    np.testing.assert_allclose(list(res.params.values()), ref.params, rtol=1e-10)
    np.testing.assert_allclose(list(res.std_errors.values()), ref.bse, rtol=1e-9)


def test_clustered_standard_errors_match_statsmodels_on_simulated_panel():
    panel = _simulated_panel(n_sec=60, n_months=24, seed=3)
    res = fit_model(panel, ModelSpec("p", regressors=("amihud", "log_size"), estimator="pooled",
                                     cluster=("security", "month")))
    x = sm.add_constant(panel.select("amihud", "log_size").to_numpy())
    groups = np.column_stack([_codes(panel, "security"), _codes(panel, "month")])
    ref = sm.OLS(panel.get_column("ret_next").to_numpy(), x).fit(cov_type="cluster", cov_kwds={"groups": groups})
    np.testing.assert_allclose(list(res.std_errors.values()), ref.bse, rtol=1e-9)


def test_robust_standard_errors_match_statsmodels_hc1(grunfeld):
    res = fit_model(grunfeld, ModelSpec("p", regressors=("value", "capital"), estimator="pooled",
                                        covariance="robust"))
    x = sm.add_constant(grunfeld.select("value", "capital").to_numpy())
    # White (1980) with the N/(N-k) factor = statsmodels HC1.
    ref = sm.OLS(grunfeld.get_column("ret_next").to_numpy(), x).fit(cov_type="HC1")
    np.testing.assert_allclose(list(res.std_errors.values()), ref.bse, rtol=1e-9)


def test_fixed_effects_recover_known_slopes_where_pooled_is_biased():
    panel = _simulated_panel(seed=5)
    fe = fit_model(panel, ModelSpec("fe", regressors=("amihud", "log_size"), estimator="fixed_effects",
                                    effects=("security", "month")))
    pooled = fit_model(panel, ModelSpec("p", regressors=("amihud", "log_size"), estimator="pooled"))
    # Truth 0.5 / -0.3; security effects correlated with amihud bias pooled OLS
    # upward by cov(x1, a)/var(x1) = 0.8 / 1.64 ~ 0.49 (simulation design).
    assert fe.params["amihud"] == pytest.approx(0.5, abs=0.03)
    assert fe.params["log_size"] == pytest.approx(-0.3, abs=0.03)
    assert pooled.params["amihud"] == pytest.approx(0.5 + 0.8 / 1.64, abs=0.06)


# -------------------------------------------------------------- Driscoll-Kraay


def _driscoll_kraay_numpy(panel: pl.DataFrame, regressors: list[str], lags: int) -> np.ndarray:
    """Driscoll & Kraay (1998): (X'X)^-1 [sum_j w_j (G_j + G_j')] (X'X)^-1 * N/(N-k)."""
    frame = panel.sort("month", "security")
    y = frame.get_column("ret_next").to_numpy()
    x = np.column_stack([np.ones(frame.height), frame.select(regressors).to_numpy()])
    b = np.linalg.solve(x.T @ x, x.T @ y)
    scores = x * (y - x @ b)[:, None]
    t_codes = _codes(frame, "month")
    h = np.zeros((t_codes.max() + 1, x.shape[1]))
    np.add.at(h, t_codes, scores)
    s = h.T @ h
    for j in range(1, lags + 1):
        g = h[j:].T @ h[:-j]
        s += (1 - j / (lags + 1)) * (g + g.T)
    bread = np.linalg.inv(x.T @ x)
    n, k = x.shape
    return np.sqrt(np.diag(bread @ s @ bread) * n / (n - k))


@pytest.mark.parametrize("lags", [0, 2, 4])
def test_driscoll_kraay_matches_numpy_and_statsmodels_groupsum(grunfeld, lags):
    res = fit_model(grunfeld, ModelSpec("dk", regressors=("value", "capital"), estimator="driscoll_kraay",
                                        lags=lags))
    expected = _driscoll_kraay_numpy(grunfeld, ["value", "capital"], lags)
    np.testing.assert_allclose(list(res.std_errors.values()), expected, rtol=1e-9)
    # statsmodels "hac-groupsum" is the same estimator without the N/(N-k)
    # factor (measured: the ratio is exactly sqrt(N/(N-k)) = sqrt(200/197)).
    x = sm.add_constant(grunfeld.select("value", "capital").to_numpy())
    ref = sm.OLS(grunfeld.get_column("ret_next").to_numpy(), x).fit(
        cov_type="hac-groupsum", cov_kwds={"time": _codes(grunfeld, "month"), "maxlags": lags, "use_correction": False}
    )
    np.testing.assert_allclose(list(res.std_errors.values()), ref.bse * np.sqrt(200 / 197), rtol=1e-9)


@pytest.mark.parametrize("lags", [0, 3])
def test_driscoll_kraay_with_security_effects_matches_the_within_formula(grunfeld, lags):
    # Driscoll & Kraay (1998) on the within-transformed Grunfeld panel (each
    # variable demeaned by firm), with the small-sample factor N/(N-k-G): the
    # G = 10 absorbed firm means count as estimated parameters, as linearmodels'
    # PanelOLS does with debiased=True (documented in fit_model). N = 200,
    # k = 2 slopes, so the factor is 200/188, not the 200/198 of N/(N-k).
    res = fit_model(grunfeld, ModelSpec("dk_fe", regressors=("value", "capital"), estimator="driscoll_kraay",
                                        effects=("security",), lags=lags))
    frame = grunfeld.sort("month", "security")
    within = frame.with_columns(pl.col(c) - pl.col(c).mean().over("security") for c in ("ret_next", "value", "capital"))
    y = within.get_column("ret_next").to_numpy()
    x = within.select("value", "capital").to_numpy()
    b = np.linalg.solve(x.T @ x, x.T @ y)
    # Grunfeld within slopes 0.1101 and 0.3101 (Baltagi, Econometric Analysis of Panel Data, Grunfeld table; from memory)
    assert b == pytest.approx([0.1101, 0.3101], abs=5e-5)
    scores = x * (y - x @ b)[:, None]
    h = np.zeros((_codes(frame, "month").max() + 1, 2))
    np.add.at(h, _codes(frame, "month"), scores)
    s = h.T @ h
    for j in range(1, lags + 1):
        g = h[j:].T @ h[:-j]
        s += (1 - j / (lags + 1)) * (g + g.T)
    bread = np.linalg.inv(x.T @ x)
    expected = np.sqrt(np.diag(bread @ s @ bread) * 200 / (200 - 2 - 10))
    assert [res.params["value"], res.params["capital"]] == pytest.approx(b, rel=1e-10)
    np.testing.assert_allclose([res.std_errors["value"], res.std_errors["capital"]], expected, rtol=1e-9)
    # and not the factor without the firm effects: the two differ by sqrt(198/188) = 1.026
    assert res.std_errors["value"] / (expected[0] * np.sqrt(188 / 198)) == pytest.approx(np.sqrt(198 / 188), rel=1e-9)


def test_driscoll_kraay_recovers_slopes_and_exceeds_white_under_common_shocks():
    panel = _simulated_panel(n_sec=100, n_months=60, seed=9)
    dk = fit_model(panel, ModelSpec("dk", regressors=("amihud", "log_size"), estimator="driscoll_kraay",
                                    effects=("security",), lags=3))
    # within 4 of the estimator's own (Driscoll-Kraay) standard errors of the truth
    assert dk.params["amihud"] == pytest.approx(0.5, abs=4 * dk.std_errors["amihud"])
    assert dk.params["log_size"] == pytest.approx(-0.3, abs=4 * dk.std_errors["log_size"])
    # Month shocks g_t (sd 0.5) in the error are common to all securities of a
    # month: White ignores that correlation, DK does not (measured ratio ~3).
    dk_pooled = fit_model(panel, ModelSpec("dk", regressors=("amihud",), estimator="driscoll_kraay", lags=3))
    white = fit_model(panel, ModelSpec("w", regressors=("amihud",), estimator="pooled", covariance="robust"))
    assert dk_pooled.std_errors["intercept"] > 2 * white.std_errors["intercept"]


# ------------------------------------------------------------ input handling


def test_rows_with_missing_values_are_dropped_and_counted():
    panel = _simulated_panel(n_sec=40, n_months=12, seed=1)
    holed = panel.with_columns(
        pl.when(pl.int_range(pl.len()) % 10 == 0).then(None).otherwise(pl.col("amihud")).alias("amihud"),
        pl.when(pl.int_range(pl.len()) % 25 == 1).then(float("nan")).otherwise(pl.col("log_size")).alias("log_size"),
    )
    n_missing = holed.filter(pl.col("amihud").is_null() | pl.col("log_size").is_nan()).height
    res = fit_model(holed, ModelSpec("p", regressors=("amihud", "log_size"), estimator="pooled"))
    assert res.nobs == panel.height - n_missing
    assert res.nobs_dropped == n_missing
    ref = fit_model(holed.filter(pl.col("amihud").is_not_null() & pl.col("log_size").is_not_nan()),
                    ModelSpec("p", regressors=("amihud", "log_size"), estimator="pooled"))
    assert res.params == ref.params


def test_missing_column_names_the_column():
    panel = _simulated_panel(n_sec=10, n_months=6)
    with pytest.raises(InputError, match="roll_spread"):
        fit_model(panel, ModelSpec("m1", regressors=("roll_spread",)))


def test_lags_not_below_months_is_a_clear_error():
    panel = _simulated_panel(n_sec=20, n_months=5)
    with pytest.raises(ConfigError, match="'lags' is 6 but the sample has 5 months"):
        fit_model(panel, ModelSpec("m1", regressors=("amihud",)))


def test_model_spec_from_config_and_its_errors():
    spec = ModelSpec.from_config({"name": "m", "regressors": ["amihud"], "estimator": "pooled",
                                  "cluster": ["security", "month"]})
    assert spec.covariance == "clustered" and spec.cluster == ("security", "month")
    assert ModelSpec.from_config({"name": "d", "regressors": ["amihud"], "estimator": "driscoll_kraay"}).covariance \
        == "bartlett"
    assert ModelSpec.from_config({"name": "f", "regressors": "amihud", "lags": None}).lags is None
    cases = [
        ({"name": "m2", "regressors": ["a"], "regresors": ["b"]}, r"model 'm2': unknown key\(s\) \['regresors'\]"),
        ({"name": "m3", "regressors": ["a"], "estimator": "ols"}, r"model 'm3': 'estimator' is 'ols'"),
        ({"name": "m4", "regressors": ["a"], "estimator": "pooled", "covariance": "newey_west"},
         r"model 'm4': 'covariance' is 'newey_west'"),
        ({"name": "m5", "regressors": ["a"], "covariance": "clustered"}, r"model 'm5': 'covariance' is 'clustered'"),
        ({"name": "m6", "regressors": ["a"], "lags": -1}, r"model 'm6': 'lags' is -1"),
        ({"name": "m7", "regressors": ["a"], "estimator": "pooled", "cluster": ["industry"]},
         r"model 'm7': 'cluster' has \['industry'\]"),
        ({"name": "m8", "regressors": ["a"], "estimator": "fixed_effects"}, r"model 'm8'.*needs 'effects'"),
        ({"name": "m9", "regressors": []}, r"model 'm9': 'regressors' is empty"),
        ({"name": "m10", "regressors": ["a"], "effects": ["security"]}, r"model 'm10': 'effects'"),
        # the regression library's option words are refused, naming ours
        ({"name": "m11", "regressors": ["a"], "estimator": "fixed_effects", "effects": ["entity"]},
         r"model 'm11': 'effects' has 'entity'; the word here is 'security'"),
        ({"name": "m12", "regressors": ["a"], "estimator": "fixed_effects", "effects": ["time"]},
         r"'effects' has 'time'; the word here is 'month'"),
        ({"name": "m13", "regressors": ["a"], "estimator": "pooled", "covariance": "unadjusted"},
         r"'covariance' has 'unadjusted'; the word here is 'plain'"),
        ({"name": "m14", "regressors": ["a"], "estimator": "driscoll_kraay", "covariance": "kernel"},
         r"'covariance' has 'kernel'; the word here is 'bartlett'"),
        ({"regressors": ["a"]}, r"no 'name'"),
    ]
    for entry, message in cases:
        with pytest.raises(ConfigError, match=message):
            ModelSpec.from_config(entry)


# --------------------------------------------------------------- the table


def _result(name, estimator, params, tstats, pvalues, nobs, months, r2):
    return ModelResult(name=name, estimator=estimator, covariance="x", params=params,
                       std_errors={k: 1.0 for k in params}, tstats=tstats, pvalues=pvalues,
                       nobs=nobs, n_months=months, n_securities=10, r2=r2)


def test_regression_table_layout_and_stars():
    a = _result("(1)", "fama_macbeth", {"intercept": 0.01234, "amihud": 0.25},
                {"intercept": 1.5, "amihud": 2.71828}, {"intercept": 0.2, "amihud": 0.009}, 1200, 60, 0.04567)
    b = _result("(2)", "pooled", {"intercept": -0.0004, "amihud": 0.1, "log_size": -0.0312},
                {"intercept": -0.1, "amihud": 1.7, "log_size": -2.2}, {"intercept": 0.92, "amihud": 0.09,
                                                                       "log_size": 0.03}, 1300, 61, 0.1)
    table = regression_table([a, b], stars=True, digits=3)
    assert table.columns == ["variable", "(1)", "(2)"]
    assert table.to_dict(as_series=False) == {
        "variable": ["amihud", "", "log_size", "", "intercept", "", "N", "Months",
                     "R-squared (Fama-MacBeth: average)"],
        "(1)": ["0.250***", "(2.718)", "", "", "0.012", "(1.500)", "1200", "60", "0.046"],
        "(2)": ["0.100*", "(1.700)", "-0.031**", "(-2.200)", "0.000", "(-0.100)", "1300", "61", "0.100"],
    }
    plain = regression_table([a], digits=2)
    assert plain.get_column("(1)").to_list()[:2] == ["0.25", "(2.72)"]
    assert plain.get_column("variable").to_list()[-1] == "Average R-squared"


def test_regression_table_from_fitted_models_is_deterministic(grunfeld):
    specs = [ModelSpec("pooled", regressors=("value", "capital"), estimator="pooled"),
             ModelSpec("within", regressors=("value", "capital"), estimator="fixed_effects", effects=("security",))]
    first = regression_table([fit_model(grunfeld, s) for s in specs])
    second = regression_table([fit_model(grunfeld, s) for s in specs])
    assert first.equals(second)
    within = fit_model(grunfeld, specs[1])
    assert first.get_column("within").to_list()[:4] == [
        "0.110", f"({within.tstats['value']:.3f})", "0.310", f"({within.tstats['capital']:.3f})"
    ]
    assert first.row(first.height - 3) == ("N", "200", "200")


# ----------------------------------------------------------- Newey-West mean


@pytest.mark.parametrize("lags", [0, 1, 6])
def test_newey_west_mean_matches_statsmodels_hac(lags):
    rng = np.random.default_rng(2024)
    e = rng.normal(size=240)
    x = 0.002 + np.convolve(e, [1.0, 0.6, 0.3], mode="same") * 0.01  # MA(2), autocorrelated
    out = newey_west_mean(x, lags=lags)
    ref = sm.OLS(x, np.ones_like(x)).fit(cov_type="HAC", cov_kwds={"maxlags": lags, "use_correction": True})
    assert out["mean"] == pytest.approx(x.mean(), rel=1e-12)
    assert out["std_error"] == pytest.approx(ref.bse[0], rel=1e-10)
    assert out["tstat"] == pytest.approx(ref.tvalues[0], rel=1e-10)
    assert out["n"] == 240 and out["lags"] == lags


def test_fama_macbeth_skips_and_counts_months_that_cannot_be_estimated():
    panel = _simulated_panel(n_sec=30, n_months=12, seed=2, loading=0.0)
    first = panel.get_column("month").min()
    # Keep two securities in the first month: 2 rows < 3 parameters.
    thin = panel.filter((pl.col("month") != first) | pl.col("security").is_in(["SIM0000", "SIM0001"]))
    with pytest.warns(Warning, match="cannot be estimated"):
        res = fit_model(thin, ModelSpec("fm", regressors=("amihud", "log_size"), lags=2))
    slopes, _ = _per_month_ols(thin.filter(pl.col("month") != first), ["amihud", "log_size"])
    assert res.n_months == 11 and res.nobs == 11 * 30 and res.nobs_skipped == 2
    np.testing.assert_allclose(res.params["amihud"], slopes[:, 1].mean(), rtol=1e-10)
    assert "2 in months that could not be estimated" in res.summary()


# ------------------------------------------------------------ several markets


def _with_markets(panel: pl.DataFrame, n_markets: int) -> pl.DataFrame:
    """Securities dealt round ``n_markets`` invented market codes in name order."""
    names = panel.get_column("security").unique().sort()
    codes = pl.DataFrame({"security": names, "market": [f"M{i % n_markets}" for i in range(len(names))]})
    return panel.join(codes, on="security").sort("security", "month")


def test_market_clusters_match_statsmodels_on_grunfeld(grunfeld):
    # Grunfeld (statsmodels' shipped panel), its ten firms dealt into five invented markets: pooled OLS with
    # standard errors clustered by market against statsmodels cov_type="cluster" (Petersen 2009), and the
    # two-way market x month version against Cameron, Gelbach & Miller (2011) in statsmodels
    panel = _with_markets(grunfeld, 5)
    x = sm.add_constant(panel.select("value", "capital").to_numpy())
    y = panel.get_column("ret_next").to_numpy()
    market, month = _codes(panel, "market"), _codes(panel, "month")
    for cluster, groups in ((("market",), market), (("market", "month"), np.column_stack([market, month]))):
        res = fit_model(panel, ModelSpec("p", regressors=("value", "capital"), estimator="pooled", cluster=cluster))
        ref = sm.OLS(y, x).fit(cov_type="cluster", cov_kwds={"groups": groups})
        np.testing.assert_allclose(list(res.params.values()), ref.params, rtol=1e-10)
        np.testing.assert_allclose(list(res.std_errors.values()), ref.bse, rtol=1e-9)
        assert res.cluster == cluster


def test_market_effects_as_dummies_and_as_absorbed_effects(grunfeld):
    # Frisch-Waugh-Lovell: dummies for the markets in pooled OLS and the absorbed market effect
    # (linearmodels' other_effects) give the same slopes; both match statsmodels OLS with the dummies
    panel = _with_markets(grunfeld, 3)
    dummies = fit_model(panel, ModelSpec("d", regressors=("value", "capital"), estimator="pooled",
                                         effects=("market",), covariance="robust"))
    absorbed = fit_model(panel, ModelSpec("a", regressors=("value", "capital"), estimator="fixed_effects",
                                          effects=("market",), covariance="robust"))
    m = panel.get_column("market").to_numpy()
    x = sm.add_constant(np.column_stack([panel.select("value", "capital").to_numpy(), m == "M1", m == "M2"])
                        .astype(float))
    ref = sm.OLS(panel.get_column("ret_next").to_numpy(), x).fit(cov_type="HC1")
    assert list(dummies.params) == ["intercept", "value", "capital", "market[M1]", "market[M2]"]
    np.testing.assert_allclose(list(dummies.params.values()), ref.params, rtol=1e-10)
    np.testing.assert_allclose(list(dummies.std_errors.values()), ref.bse, rtol=1e-9)
    np.testing.assert_allclose([absorbed.params["value"], absorbed.params["capital"]], ref.params[1:3], rtol=1e-9)


def test_market_effects_recover_known_slope_on_two_markets():
    # hand-built two-market panel (invented): market levels differ by 5%, the slope is 0.5; without the
    # effect the level gap loads on the regressor (which is higher in the second market)
    rng = np.random.default_rng(17)
    rows = []
    for month in range(36):
        for i in range(40):
            market = "AAA" if i < 20 else "BBB"
            x = rng.normal(0.0, 1.0) + (1.0 if market == "BBB" else 0.0)
            y = 0.5 * x + (0.05 if market == "BBB" else 0.0) * 20 + rng.normal(0.0, 0.1)
            rows.append({"security": f"s{i:02d}", "month": dt.date(2000 + month // 12, month % 12 + 1, 1),
                         "market": market, "x": x, "ret_next": y})
    panel = pl.DataFrame(rows)
    fm = fit_model(panel, ModelSpec("fm", regressors=("x",), effects=("market",)))
    plain = fit_model(panel, ModelSpec("fm0", regressors=("x",)))
    assert abs(fm.params["x"] - 0.5) < 0.01 and abs(fm.params["market[BBB]"] - 1.0) < 0.02
    assert plain.params["x"] > 0.7
    # the Fama-MacBeth slope with dummies is the mean of per-month OLS with the dummy (Fama & MacBeth 1973)
    per_month = [np.linalg.lstsq(np.column_stack([np.ones(b.height), b["x"], b["market"] == "BBB"]).astype(float),
                                 b["ret_next"].to_numpy(), rcond=None)[0][1]
                 for _, b in panel.sort("month", "security").group_by("month", maintain_order=True)]
    np.testing.assert_allclose(fm.params["x"], np.mean(per_month), rtol=1e-10)


def test_market_words_need_a_market_column(grunfeld):
    with pytest.raises(InputError, match="need the panel's 'market' column"):
        fit_model(grunfeld, ModelSpec("p", regressors=("value",), estimator="pooled", cluster=("market",)))
    with pytest.raises(ConfigError, match="security effects absorb market effects"):
        ModelSpec("p", regressors=("value",), estimator="fixed_effects", effects=("security", "market"))
