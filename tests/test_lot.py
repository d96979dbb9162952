"""LOT (Lesmond, Ogden & Trzcinka 1999): the likelihood against scipy, recovery of known thresholds, the stage."""

from datetime import date, timedelta

import numpy as np
import polars as pl
import pytest
from scipy.optimize import approx_fprime, minimize
from scipy.stats import norm

from liqpanel.measures import compute_monthly
from liqpanel.measures.lot import fit_lot, log_likelihood, regions

A1, A2, BETA, SIGMA = -0.01, 0.012, 1.0, 0.02  # true round-trip cost 0.022


def simulate(days: int, months: int, seed: int, a1=A1, a2=A2, beta=BETA, sigma=SIGMA, market_sd=0.01):
    """Returns of the LOT model: R* = beta R_m + e; R = R* - alpha_1 below alpha_1, 0 between, R* - alpha_2 above."""
    rng = np.random.default_rng(seed)
    market = rng.normal(0, market_sd, (days, months))
    star = beta * market + rng.normal(0, sigma, (days, months))
    ret = np.where(star < a1, star - a1, np.where(star > a2, star - a2, 0.0))
    return ret, market


@pytest.mark.parametrize("form", ["ysplit", "mixed"])
def test_gradient_matches_finite_differences(form):
    # reference library: scipy.optimize.approx_fprime of the same log-likelihood
    ret, market = simulate(40, 1, seed=1)
    valid = np.ones_like(ret, dtype=bool)
    masks = regions(ret, market, form)
    theta = np.array([[-0.008], [0.01], [0.9], [np.log(0.018)]])
    _, grad = log_likelihood(theta, ret, market, masks, valid)
    numeric = approx_fprime(theta[:, 0], lambda t: log_likelihood(t[:, None], ret, market, masks, valid)[0][0], 1e-7)
    np.testing.assert_allclose(grad[:, 0], numeric, rtol=1e-4, atol=1e-2)


@pytest.mark.parametrize("form", ["ysplit", "mixed"])
def test_hessian_matches_finite_differences_of_the_gradient(form):
    # central differences of the analytic gradient (checked above against scipy), two months at once
    ret, market = simulate(40, 2, seed=7)
    valid = np.ones_like(ret, dtype=bool)
    masks = regions(ret, market, form)
    theta = np.array([[-0.008, -0.012], [0.01, 0.009], [0.9, 1.2], [np.log(0.018), np.log(0.025)]])
    hessian = log_likelihood(theta, ret, market, masks, valid, hessian=True)[2]
    for j in range(4):
        step = 1e-6 * (1.0 if j >= 2 else 0.01)
        up, down = theta.copy(), theta.copy()
        up[j] += step
        down[j] -= step
        column = (log_likelihood(up, ret, market, masks, valid)[1] - log_likelihood(down, ret, market, masks, valid)[1]) / (2 * step)
        np.testing.assert_allclose(hessian[:, :, j], column.T, rtol=1e-4, atol=1e-3 * np.abs(hessian).max())


@pytest.mark.parametrize("form", ["ysplit", "mixed"])
def test_batched_fit_equals_scipy_minimize_month_by_month(form):
    # reference library: scipy.optimize.minimize (BFGS) of each month's negative log-likelihood
    ret, market = simulate(60, 4, seed=2)
    valid = np.ones_like(ret, dtype=bool)
    fit = fit_lot(ret, market, valid, form=form)
    assert fit["converged"].all()
    for m in range(4):
        r, x = ret[:, [m]], market[:, [m]]
        masks = regions(r, x, form)
        result = minimize(lambda t: -log_likelihood(t[:, None], r, x, masks, valid[:, [m]])[0][0],
                          np.array([-0.01, 0.01, 1.0, np.log(0.02)]), method="Nelder-Mead",
                          options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 20000, "maxfev": 40000})
        assert -result.fun <= fit["log_likelihood"][m] + 1e-7  # ours is at least as high
        assert fit["alpha_2"][m] - fit["alpha_1"][m] == pytest.approx(result.x[1] - result.x[0], abs=2e-5)


def test_ysplit_recovers_the_thresholds_on_long_windows():
    # Known truth alpha_1 = -0.01, alpha_2 = 0.012 (cost 0.022), beta = 1, sigma = 0.02; the Y-split likelihood is
    # the model's own. 20 windows of 1,000 days: tolerance 3% of the cost for the mean (measured: sd of one
    # window's cost 5% of the truth, so 1.2% for the mean of 20).
    ret, market = simulate(1000, 20, seed=3)
    fit = fit_lot(ret, market, np.ones_like(ret, dtype=bool), form="ysplit")
    assert fit["converged"].all()
    assert np.mean(fit["alpha_2"] - fit["alpha_1"]) == pytest.approx(A2 - A1, rel=0.03)
    assert np.mean(fit["beta"]) == pytest.approx(BETA, abs=0.03)
    assert np.mean(fit["sigma"]) == pytest.approx(SIGMA, rel=0.02)
    # LOT (1999): P(R = 0) = Phi((alpha_2 - beta R_m) / sigma) - Phi((alpha_1 - beta R_m) / sigma)
    implied = norm.cdf((fit["alpha_2"] - fit["beta"] * market) / fit["sigma"]) - norm.cdf(
        (fit["alpha_1"] - fit["beta"] * market) / fit["sigma"])
    assert implied.mean() == pytest.approx((ret == 0).mean(), abs=0.005)


def test_monthly_windows_converge_and_the_median_cost_is_near_the_truth():
    # 2,000 months of 21 days: every fit converges but a handful (measured: Y-split 100%, mixed 99.9%), the median Y-split cost
    # within 10% of the truth (measured: 0.0203, 8% low), the mixed form biased up here (measured: 0.030), as the
    # sign of the market return assigns many returns to the wrong region when sigma is twice sd(beta R_m).
    ret, market = simulate(21, 2000, seed=4)
    valid = np.ones_like(ret, dtype=bool)
    ysplit, mixed = fit_lot(ret, market, valid, form="ysplit"), fit_lot(ret, market, valid, form="mixed")
    assert ysplit["converged"].mean() > 0.99 and mixed["converged"].mean() > 0.99
    cost = (ysplit["alpha_2"] - ysplit["alpha_1"])[ysplit["converged"]]
    assert np.median(cost) == pytest.approx(A2 - A1, rel=0.10)
    assert np.median((mixed["alpha_2"] - mixed["alpha_1"])[mixed["converged"]]) > A2 - A1


def test_mixed_recovers_the_cost_when_the_market_sets_the_sign():
    # With sigma small against sd(beta R_m) the market's sign is the sign of R*, so LOT's original (mixed)
    # assignment is right and both forms recover the cost (tolerance 3%).
    ret, market = simulate(1000, 10, seed=5, sigma=0.002, market_sd=0.02)
    valid = np.ones_like(ret, dtype=bool)
    for form in ("mixed", "ysplit"):
        fit = fit_lot(ret, market, valid, form=form)
        assert np.mean(fit["alpha_2"] - fit["alpha_1"]) == pytest.approx(A2 - A1, rel=0.03), form


def test_without_zero_returns_the_bounded_cost_is_zero():
    # LOT (1999): alpha_1 <= 0 <= alpha_2. With no zero return the Y-split thresholds are free intercepts of the
    # negative and positive returns, which the bounds hold at zero in almost every month (49 of 50 here); the
    # mixed form's regions follow the market's sign, so its intercepts may lie inside the bounds. Never negative.
    rng = np.random.default_rng(9)
    market = rng.normal(0, 0.01, (21, 50))
    ret = market + rng.normal(0, 0.02, (21, 50))
    for form in ("ysplit", "mixed"):
        fit = fit_lot(ret, market, np.ones_like(ret, dtype=bool), form=form)
        assert fit["converged"].all(), form
        assert (fit["alpha_1"] <= 0).all() and (fit["alpha_2"] >= 0).all(), form
    assert np.mean(fit_lot(ret, market, np.ones_like(ret, dtype=bool))["alpha_2"] == 0) >= 0.9


def test_the_stage_reports_convergence_per_month():
    ret, market = simulate(21, 6, seed=6)
    start = date(2021, 1, 1)
    daily = pl.DataFrame({
        "security": np.repeat([f"S{i}" for i in range(6)], 21),
        "date": [start + timedelta(days=d) for d in range(21)] * 6,
        "month": [start] * 126,
        "ret": ret.T.ravel(),
        "mkt_ret": market.T.ravel(),
    })
    out = compute_monthly(daily.lazy(), {"lot_ysplit": None, "lot_mixed": None})
    assert out["lot_ysplit_converged"].to_list() == [1.0] * 6
    assert (out["lot_ysplit_iterations"] > 0).all()
    assert out["lot_ysplit"].to_numpy() == pytest.approx(
        (lambda f: f["alpha_2"] - f["alpha_1"])(fit_lot(ret, market, np.ones_like(ret, dtype=bool))), rel=1e-12)
    short = compute_monthly(daily.filter(pl.col("date") < start + timedelta(days=4)).lazy(), {"lot_ysplit": {"min_days": 1}})
    assert short["lot_ysplit_reason"].to_list() == ["too_few_returns"] * 6


def test_batched_cholesky_solve_equals_numpy_linalg_solve():
    # reference library: numpy.linalg.solve, month by month; a matrix that is not positive definite is reported
    from liqpanel.measures.lot_solver import _cholesky_solve

    rng = np.random.default_rng(11)
    a = rng.normal(size=(50, 4, 4))
    system = a @ a.transpose(0, 2, 1) + 0.1 * np.eye(4)
    system[7] = np.diag([1.0, -1.0, 1.0, 1.0])
    rhs = rng.normal(size=(50, 4))
    solution, failed = _cholesky_solve(np.moveaxis(system, 0, 2), rhs.T)
    assert np.flatnonzero(failed).tolist() == [7]
    expected = np.linalg.solve(system, rhs[:, :, None])[:, :, 0].T
    np.testing.assert_allclose(solution[:, ~failed], expected[:, ~failed], rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("form", ["ysplit", "mixed"])
def test_months_without_zero_returns_equal_scipy_bounded_minimize(form):
    # reference library: scipy.optimize.minimize (L-BFGS-B with the bounds alpha_1 <= 0 <= alpha_2) of each month's
    # negative log-likelihood; without zero returns the fit starts at bounded least squares (its maximum)
    rng = np.random.default_rng(12)
    market = rng.normal(0, 0.01, (21, 5))
    ret = market + rng.normal(0, 0.02, (21, 5))
    valid = np.ones_like(ret, dtype=bool)
    fit = fit_lot(ret, market, valid, form=form)
    assert fit["converged"].all()
    for m in range(5):
        r, x = ret[:, [m]], market[:, [m]]
        masks = regions(r, x, form)

        def negative(t):
            ll, grad = log_likelihood(t[:, None], r, x, masks, valid[:, [m]])
            return -ll[0], -grad[:, 0]

        result = minimize(negative, np.array([-0.001, 0.001, 1.0, np.log(0.02)]), jac=True, method="L-BFGS-B",
                          bounds=[(None, 0.0), (0.0, None), (None, None), (None, None)],
                          options={"ftol": 1e-15, "gtol": 1e-10, "maxiter": 10000})
        assert -result.fun <= fit["log_likelihood"][m] + 1e-9  # ours is at least as high
        assert fit["beta"][m] == pytest.approx(result.x[2], abs=1e-4)
        assert fit["alpha_2"][m] - fit["alpha_1"][m] == pytest.approx(result.x[1] - result.x[0], abs=1e-5)


def test_pieces_of_months_give_the_iterates_of_one_batch(monkeypatch):
    # The months are fitted in pieces and the slow ones resumed together; the result must not depend on that.
    from liqpanel.measures import lot

    ret, market = simulate(21, 300, seed=13)
    valid = np.ones_like(ret, dtype=bool)
    whole = fit_lot(ret, market, valid, form="mixed")
    monkeypatch.setattr(lot, "CHUNK_MONTHS", 7)
    monkeypatch.setattr(lot, "FIRST_TURNS", 2)
    pieces = fit_lot(ret, market, valid, form="mixed")
    for key in whole:
        np.testing.assert_array_equal(pieces[key], whole[key], err_msg=key)
    assert (whole["iterations"] > 2).any()  # some months were resumed


def test_a_step_past_a_bound_stops_on_it_and_solves_the_rest_again():
    # reference library: numpy.linalg.solve of the damped Newton system with the crossing threshold held on its
    # bound (the others solved for given that move); a step inside the bounds is the full damped Newton step.
    from liqpanel.measures.lot_likelihood import DIAGONAL, UPPER
    from liqpanel.measures.lot_solver import _newton_step

    rng = np.random.default_rng(5)
    a = rng.normal(size=(3, 4, 4))
    hess = -(a @ a.transpose(0, 2, 1) + 0.5 * np.eye(4))  # (months, 4, 4), negative definite
    grad = rng.normal(size=(4, 3))
    theta = np.array([[-0.01, -0.01, -0.01], [0.01, 0.01, 0.01], [1.0, 1.0, 1.0], [-4.0, -4.0, -4.0]])
    damping = np.full(3, 1e-3)
    system = -hess.copy()
    system[:, np.arange(4), np.arange(4)] += damping[:, None] * (np.abs(hess[:, np.arange(4), np.arange(4)]) + 1e-12)
    grad[:, 0] = np.linalg.solve(system[0], np.array([-0.005, 0.005, 0.0, 0.0]))  # month 0: the full step stays inside
    grad[:, 1] = system[1] @ np.array([0.03, 0.0, 0.1, 0.0])  # month 1: alpha_1 would pass 0
    grad[:, 2] = system[2] @ np.array([0.0, -0.02, 0.0, 0.1])  # month 2: alpha_2 would pass 0
    packed = np.stack([hess[:, i, j] for i, j in zip(*UPPER)])
    assert DIAGONAL.tolist() == [0, 4, 7, 9]
    candidate = _newton_step(theta, grad, packed, damping)
    np.testing.assert_allclose(candidate[:, 0], theta[:, 0] + np.linalg.solve(system[0], grad[:, 0]), rtol=1e-10)
    for month, p in ((1, 0), (2, 1)):
        move = -theta[p, month]  # onto the bound
        rest = [q for q in range(4) if q != p]
        expected = np.linalg.solve(system[month][np.ix_(rest, rest)], grad[rest, month] - system[month][rest, p] * move)
        assert candidate[p, month] == 0.0
        np.testing.assert_allclose(candidate[rest, month], theta[rest, month] + expected, rtol=1e-10, atol=1e-14)
