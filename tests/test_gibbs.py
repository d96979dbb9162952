"""Hasbrouck (2004, 2009) Gibbs sampler for the Roll (1984) model.

Checks: the truncated-normal draw against scipy.stats.truncnorm; recovery of
c on data simulated from the Roll model; agreement with a plain per-month
single-site sampler written here; reproducibility; the guard against stuck
chains; and recovery on the project's market simulator.
"""

from __future__ import annotations

import datetime as dt
import logging
import math

import numpy as np
import polars as pl
import pytest
from scipy import stats

from liqpanel.core.errors import ConfigError
from liqpanel.measures import gibbs
from liqpanel.measures.gibbs import draw_truncated_normal, sample_roll_model
from liqpanel.measures.gibbs_months import gibbs_spread


def roll_changes(c: float, sigma: float, days: int, months: int, seed: int, loading=None, market=None) -> np.ndarray:
    """Daily log price changes of the Roll (1984) model, shape (days, months).

    dp_t = c (q_t - q_{t-1}) + loading * r_m,t + u_t, q_t = +-1 with probability
    1/2, u_t ~ N(0, sigma^2) (Roll 1984; Hasbrouck 2009, the model estimated).
    """
    rng = np.random.default_rng(seed)
    q = rng.choice([-1.0, 1.0], size=(days + 1, months))
    dp = c * np.diff(q, axis=0) + rng.normal(0.0, sigma, size=(days, months))
    if loading is not None:
        dp = dp + loading * market
    return dp


def window_table(dp: np.ndarray, market: np.ndarray | None = None) -> pl.LazyFrame:
    """A daily table with one estimation window per column, all labelled January 2021."""
    days, months = dp.shape
    dates = np.busday_offset("2021-01-04", np.arange(days), roll="forward")
    columns = {
        "security": np.repeat([f"W{m:04d}" for m in range(months)], days),
        "date": np.tile(dates, months),
        "ret": np.expm1(dp.T.ravel()),
    }
    if market is not None:
        columns["mkt_ret"] = np.expm1(market.T.ravel())
    return pl.DataFrame(columns).with_columns(pl.lit(dt.date(2021, 1, 1)).alias("month")).lazy()


def reference_gibbs(dp, sweeps, burn, seed, c_mean=0.0, c_sd=0.05, alpha0=1e-12, beta0=1e-12):
    """Plain per-month single-site Gibbs sampler for the Roll model (Hasbrouck 2004, 2009).

    One month, scalar Python: c | q, sigma^2 drawn with scipy.stats.truncnorm,
    sigma^2 | c, q inverse gamma, then q_0 .. q_n one at a time, excluding the
    configurations with every q_t - q_{t-1} = 0 (the same prior as the library).
    """
    rng = np.random.default_rng(seed)
    n = len(dp)
    q = [1.0 if k % 2 == 0 else -1.0 for k in range(n + 1)]
    sigma2 = max(float(np.var(dp)), 1e-12)
    cs, sigmas = [], []
    for sweep in range(sweeps):
        dq = [q[j + 1] - q[j] for j in range(n)]
        precision = 1.0 / c_sd**2 + sum(d * d for d in dq) / sigma2
        mean = (c_mean / c_sd**2 + sum(d * x for d, x in zip(dq, dp)) / sigma2) / precision
        sd = 1.0 / math.sqrt(precision)
        c = float(stats.truncnorm.rvs(-mean / sd, np.inf, loc=mean, scale=sd, random_state=rng))
        ssr = sum((x - c * d) ** 2 for x, d in zip(dp, dq))
        sigma2 = (beta0 + ssr / 2.0) / rng.gamma(alpha0 + n / 2.0)
        for k in range(n + 1):
            log_odds = 0.0
            if k >= 1:
                log_odds += 2.0 * c / sigma2 * (dp[k - 1] + c * q[k - 1])
            if k <= n - 1:
                log_odds -= 2.0 * c / sigma2 * (dp[k] - c * q[k + 1])
            allowed = []
            for value in (1.0, -1.0):
                trial = q[:k] + [value] + q[k + 1 :]
                allowed.append(any(trial[j + 1] != trial[j] for j in range(n)))
            p_plus = 1.0 / (1.0 + math.exp(-max(min(log_odds, 700.0), -700.0)))
            if not allowed[0]:
                p_plus = 0.0
            elif not allowed[1]:
                p_plus = 1.0
            q[k] = 1.0 if rng.random() < p_plus else -1.0
        if sweep >= burn:
            cs.append(c)
            sigmas.append(math.sqrt(sigma2))
    return np.array(cs), np.array(sigmas)


@pytest.mark.parametrize(
    "mean, sd",
    [(0.01, 0.005), (-0.02, 0.005), (-0.3, 0.01), (0.5, 0.01), (0.0, 1.0)],
)
def test_truncated_normal_draw_matches_scipy(mean, sd):
    # Reference library: scipy.stats.truncnorm with the same parameters, lower bound 0.
    rng = np.random.default_rng(7)
    n = 200_000
    draws = draw_truncated_normal(np.full(n, mean), np.full(n, sd), 1.0 - rng.random(n))
    reference = stats.truncnorm(-mean / sd, np.inf, loc=mean, scale=sd)
    ref_mean, ref_var = reference.stats(moments="mv")
    assert draws.min() >= 0.0
    assert abs(draws.mean() - ref_mean) < 5.0 * math.sqrt(ref_var / n)  # 5 standard errors of the mean
    assert draws.var() == pytest.approx(float(ref_var), rel=0.03)
    assert stats.kstest(draws, reference.cdf).pvalue > 1e-3


def test_posterior_mean_recovers_half_spread_on_long_windows():
    # Roll (1984) model with c = 1%, sigma_u = 1% per day, 250-day windows: the
    # posterior mean is consistent (Hasbrouck 2009); measured mean 0.99 c.
    c, sigma = 0.01, 0.01
    dp = roll_changes(c, sigma, days=250, months=40, seed=1)
    out = gibbs_spread(window_table(dp), sweeps=600, burn=200, seed=3).collect()
    assert out.height == 40
    assert out["n_obs"].to_list() == [250] * 40
    assert out["gibbs_spread"].mean() / (2 * c) == pytest.approx(1.0, abs=0.05)
    assert out["gibbs_sigma_u"].mean() / sigma == pytest.approx(1.0, abs=0.05)
    assert (out["gibbs_spread_lo"] < out["gibbs_spread"]).all()
    assert (out["gibbs_spread"] < out["gibbs_spread_hi"]).all()


def test_prior_drawn_truth_is_recovered_on_average_and_covered_at_the_nominal_rate():
    # Simulation-based calibration (Cook, Gelman & Rubin 2006, from memory): draw
    # every month's c and sigma_u^2 from the sampler's own prior, simulate the
    # Roll (1984) model, and run the sampler. By Bayes' theorem (the law of
    # iterated expectations) the average posterior mean equals the prior mean
    # exactly, E[c] = c_sd sqrt(2/pi) for the half-normal prior and
    # E[sigma_u^2] = beta0 / (alpha0 - 1) for the inverse gamma, and a 90%
    # posterior interval covers the drawn truth in 90% of months; only Monte
    # Carlo error remains (4 standard errors of the 1,000 months; the
    # q-configurations the guard excludes have prior probability 2^-20). A wrong
    # full conditional moves these. Measured: 0.00818 against 0.00798 (standard
    # error 0.00015), coverage 0.896, mean sigma_u^2 4.443e-4 against 4.444e-4.
    rng = np.random.default_rng(2009)
    months, days, c_sd, alpha0, beta0 = 1000, 21, 0.01, 10.0, 10.0 * 0.02**2
    c = np.abs(rng.normal(0.0, c_sd, months))
    sigma2 = beta0 / rng.standard_gamma(alpha0, months)
    q = rng.choice([-1.0, 1.0], size=(days + 1, months))
    dp = c * np.diff(q, axis=0) + rng.standard_normal((days, months)) * np.sqrt(sigma2)
    prior = {"c_mean": 0.0, "c_sd": c_sd, "alpha0": alpha0, "beta0": beta0}
    draws = sample_roll_model(dp, np.ones(dp.shape, bool), sweeps=700, burn=200, rng=np.random.default_rng(5),
                              prior=prior)
    posterior_mean = draws.half_spread.mean(axis=0)
    se = posterior_mean.std(ddof=1) / math.sqrt(months)
    assert posterior_mean.mean() == pytest.approx(c_sd * math.sqrt(2 / math.pi), abs=4 * se)
    sigma2_mean = (draws.sigma_u**2).mean(axis=0)
    assert sigma2_mean.mean() == pytest.approx(beta0 / (alpha0 - 1), abs=4 * sigma2_mean.std(ddof=1) / math.sqrt(months))
    lo, hi = np.quantile(draws.half_spread, [0.05, 0.95], axis=0)
    assert ((lo <= c) & (c <= hi)).mean() == pytest.approx(0.90, abs=4 * math.sqrt(0.9 * 0.1 / months))


def test_short_windows_known_biases():
    # 21-day months. Half-spread large relative to volatility: close to unbiased
    # (measured 1.00 c). Half-spread small relative to volatility: the data hardly
    # identify c and the posterior mean is biased up (measured 2.7 c), the
    # small-sample behaviour described by Hasbrouck (2009).
    big = roll_changes(0.025, 0.01, days=21, months=400, seed=2)
    small = roll_changes(0.0025, 0.02, days=21, months=400, seed=3)
    draws_big = sample_roll_model(big, np.ones(big.shape, bool), sweeps=600, burn=200, rng=np.random.default_rng(1))
    draws_small = sample_roll_model(small, np.ones(small.shape, bool), sweeps=600, burn=200, rng=np.random.default_rng(1))
    assert draws_big.half_spread.mean() / 0.025 == pytest.approx(1.0, abs=0.05)
    assert 1.5 < draws_small.half_spread.mean() / 0.0025 < 4.0


def test_interval_covers_truth_at_nominal_rate():
    # 90% equal-tailed posterior interval: frequentist coverage near 90% when the
    # data identify c (measured 0.88 on 400 months).
    c = 0.025
    dp = roll_changes(c, 0.01, days=21, months=400, seed=4)
    out = gibbs_spread(window_table(dp), sweeps=600, burn=200, seed=5).collect()
    covered = ((out["gibbs_spread_lo"] <= 2 * c) & (2 * c <= out["gibbs_spread_hi"])).mean()
    assert 0.82 <= covered <= 0.96


def test_vectorised_sampler_matches_per_month_reference_loop():
    # The same posterior sampled two ways: the plain single-site loop above
    # (one month at a time, scipy.stats.truncnorm) and the library's blocked,
    # vectorised sampler run on 100 copies of the month. Tolerance: 4 batch-means
    # standard errors of the reference chain plus 2% of the posterior sd; the
    # sd and the quantiles, noisier than the mean, get 4 and 2 times that.
    dp = roll_changes(0.01, 0.01, days=21, months=2, seed=6)
    for m in range(2):
        ref_c, ref_s = reference_gibbs(list(dp[:, m]), sweeps=3000, burn=500, seed=m)
        copies = np.repeat(dp[:, m : m + 1], 100, axis=1)
        draws = sample_roll_model(copies, np.ones(copies.shape, bool), sweeps=800, burn=200, rng=np.random.default_rng(m))
        vec_c, vec_s = draws.half_spread.ravel(), draws.sigma_u.ravel()
        for ref, vec in ((ref_c, vec_c), (ref_s, vec_s)):
            batch_se = ref.reshape(25, -1).mean(axis=1).std(ddof=1) / 5.0
            tol = 4.0 * batch_se + 0.02 * ref.std()
            assert abs(ref.mean() - vec.mean()) < tol
            assert abs(ref.std() - vec.std()) < 4.0 * tol
            for level in (0.1, 0.5, 0.9):
                assert abs(np.quantile(ref, level) - np.quantile(vec, level)) < 2.0 * tol


def test_same_seed_same_draws():
    dp = roll_changes(0.01, 0.02, days=21, months=30, seed=8)
    table = window_table(dp)
    first = gibbs_spread(table, sweeps=200, burn=50, seed=11).collect()
    again = gibbs_spread(table, sweeps=200, burn=50, seed=11).collect()
    other = gibbs_spread(table, sweeps=200, burn=50, seed=12).collect()
    assert first.equals(again)
    assert not first["gibbs_spread"].equals(other["gibbs_spread"])
    # Same seed, rows shuffled: the months are processed in key order.
    shuffled = gibbs_spread(table.collect().sample(fraction=1.0, shuffle=True, seed=1).lazy(), sweeps=200, burn=50, seed=11)
    assert first.equals(shuffled.collect())


def test_no_chain_sticks():
    # Very short windows (4 returns), a tiny spread and a vague prior on c: the
    # failure described by Hasbrouck (2009) for short samples. Without the guard,
    # chains reach "every dq = 0", c is drawn from the vague prior and stays
    # there (posterior means of order of the prior scale); with the guard, no
    # kept sweep ever sees every dq = 0.
    dp = roll_changes(0.001, 0.02, days=4, months=300, seed=9)
    ok = np.ones(dp.shape, bool)
    vague = {"c_sd": 10.0}
    unguarded = sample_roll_model(dp, ok, sweeps=400, burn=100, rng=np.random.default_rng(1), prior=vague, guard=False)
    guarded = sample_roll_model(dp, ok, sweeps=400, burn=100, rng=np.random.default_rng(1), prior=vague, guard=True)
    assert (unguarded.stuck_sweeps > 0).sum() > 100
    assert unguarded.half_spread.mean(axis=0).max() > 1.0
    assert guarded.stuck_sweeps.sum() == 0
    # the prior scale is 10, the data's daily moves about 0.02: a guarded
    # posterior mean stays two orders of magnitude below the stuck chains' 1.0
    assert guarded.half_spread.mean(axis=0).max() < 0.1
    # Every guarded chain keeps moving.
    assert (guarded.half_spread.std(axis=0) > 0).all()


@pytest.mark.parametrize("with_market", [False, True])
def test_months_sampled_in_pieces_on_threads_give_the_same_draws(monkeypatch, with_market):
    # A sweep's arithmetic is elementwise or per month and its random draws stay in one stream, so
    # cutting the months into pieces run on threads must not move a single draw (bit for bit).
    rng = np.random.default_rng(21)
    market = rng.normal(0.0, 0.01, size=(21, 60)) if with_market else None
    dp = roll_changes(0.01, 0.02, days=21, months=60, seed=21, loading=1.0 if with_market else None, market=market)
    valid = np.ones(dp.shape, bool)
    valid[3, ::7] = False  # some missing days, so the masks differ between pieces

    def run():
        return sample_roll_model(dp, valid, market, sweeps=120, burn=20, rng=np.random.default_rng(4))

    monkeypatch.setattr(gibbs, "PIECE_MONTHS", 10**9)  # one piece, in the calling thread
    whole = run()
    monkeypatch.setattr(gibbs, "PIECE_MONTHS", 16)
    monkeypatch.setattr(gibbs.os, "sched_getaffinity", lambda pid: set(range(3)), raising=False)
    monkeypatch.delenv("POLARS_MAX_THREADS", raising=False)
    assert len(gibbs._Pieces(60).pieces) == 3  # three pieces of 20 months, on three threads
    pieces = run()
    for name in ("half_spread", "sigma_u", "loading", "stuck_sweeps"):
        a, b = getattr(whole, name), getattr(pieces, name)
        assert (a is None and b is None) if not with_market and name == "loading" else \
            np.array_equal(a, b, equal_nan=True), name


def test_market_loading_recovered():
    # Hasbrouck (2009): dp_t = c dq_t + beta r_m,t + u_t. With beta = 1.5 and long
    # windows the posterior means recover beta and c.
    rng = np.random.default_rng(10)
    market = rng.normal(0.0, 0.01, size=(250, 20))
    dp = roll_changes(0.01, 0.01, days=250, months=20, seed=10, loading=1.5, market=market)
    draws = sample_roll_model(dp, np.ones(dp.shape, bool), market, sweeps=600, burn=200, rng=np.random.default_rng(2))
    # Bands: 5 Monte Carlo standard errors of the 20 windows' posterior means
    # (sd across windows / sqrt(20)). Measured: loading 1.517 (se 0.021),
    # c 0.988 of the truth (se 0.012), spread 0.984 of the truth (se 0.013).
    for values, truth in ((draws.loading.mean(axis=0), 1.5), (draws.half_spread.mean(axis=0), 0.01)):
        assert values.mean() == pytest.approx(truth, abs=5 * values.std(ddof=1) / math.sqrt(values.size))
    out = gibbs_spread(window_table(dp, market), sweeps=600, burn=200, use_market=True).collect()
    spread = out["gibbs_spread"].to_numpy()
    assert spread.mean() == pytest.approx(0.02, abs=5 * spread.std(ddof=1) / math.sqrt(spread.size))
    # Without the loading the market moves inflate sigma_u: sqrt(0.01^2 + (1.5 * 0.01)^2) = 0.018.
    # Band 5%: measured 1.011 and 1.032 of those values.
    plain = gibbs_spread(window_table(dp, market), sweeps=600, burn=200).collect()
    assert plain["gibbs_sigma_u"].mean() == pytest.approx(math.hypot(0.01, 0.015), rel=0.05)
    assert out["gibbs_sigma_u"].mean() == pytest.approx(0.01, rel=0.05)


def test_missing_returns_and_short_months():
    dp = roll_changes(0.01, 0.01, days=21, months=3, seed=12)
    table = window_table(dp).collect()
    # Month W0000 keeps 2 rows (too few), W0001 loses a return in the middle.
    table = table.filter((pl.col("security") != "W0000") | (pl.col("date") < dt.date(2021, 1, 6)))
    table = table.with_columns(
        pl.when((pl.col("security") == "W0001") & (pl.col("date") == dt.date(2021, 1, 12))).then(None).otherwise(pl.col("ret")).alias("ret")
    )
    out = gibbs_spread(table.lazy(), sweeps=200, burn=50).collect()
    assert out["security"].to_list() == ["W0000", "W0001", "W0002"]
    assert out["n_obs"].to_list() == [2, 20, 21]
    assert out["reason"].to_list() == ["too_few_returns", None, None]
    assert out["gibbs_spread"].is_null().to_list() == [True, False, False]


def test_progress_is_logged_for_long_runs(monkeypatch, caplog):
    monkeypatch.setattr(gibbs, "LONG_RUN", 1)
    dp = roll_changes(0.01, 0.01, days=21, months=2, seed=13)
    with caplog.at_level(logging.INFO, logger="liqpanel.gibbs"):
        gibbs_spread(window_table(dp), sweeps=50, burn=10).collect()
    lines = [r.getMessage() for r in caplog.records if r.name == "liqpanel.gibbs"]
    assert len(lines) == 10
    assert lines[-1].startswith("sweep 50 of 50 for 2 security-months")


def test_bad_options_are_refused():
    table = window_table(roll_changes(0.01, 0.01, days=21, months=1, seed=14))
    with pytest.raises(ConfigError, match="burn"):
        gibbs_spread(table, sweeps=100, burn=100)
    with pytest.raises(ConfigError, match="`prior` has no key 'c_scale'"):
        gibbs_spread(table, prior={"c_scale": 1.0})
    with pytest.raises(ConfigError, match="interval"):
        gibbs_spread(table, interval=1.5)


@pytest.mark.parametrize(
    "spread, low, high",
    [
        # Roll model on the simulator, 21-day months, daily volatility 2%, 20 trades a day.
        (0.005, 1.5, 4.0),  # spread small relative to volatility: biased up (measured 2.8x)
        (0.02, 0.85, 1.15),  # measured 0.97x
        (0.05, 0.80, 1.05),  # measured 0.89x: half-spread and volatility of the same size
    ],
)
def test_recovery_on_market_simulator(spread, low, high):
    simulate = pytest.importorskip("liqpanel.simulate")
    from liqpanel.bars import daily_bars

    market = simulate.simulate_security_months(
        np.full(150, spread / 2), np.full(150, 0.02), np.full(150, 20.0), n_days=21, seed=21
    )
    daily = daily_bars(market.trades.lazy(), "America/New_York")
    out = gibbs_spread(daily, sweeps=300, burn=100, seed=5).collect().join(market.truth, on=["security", "month"])
    ratio = out["gibbs_spread"].mean() / out["spread"].mean()
    assert out["spread"].mean() == pytest.approx(spread)
    assert low < ratio < high
