"""The LOT fit's starting values and its batched damped Newton (Levenberg-Marquardt) iterations over the
months not yet converged (see ``liqpanel.measures.lot``)."""

from __future__ import annotations

import numpy as np

from liqpanel.measures.lot_likelihood import DIAGONAL, LotData, PACKED, _squares, evaluate, regions


MIXED_WIDTH = 2.0  # "mixed" months with zero returns: thresholds start this many half-widths past the least squares


def _starting_values(data: LotData, form: str = "ysplit") -> np.ndarray:
    """Moments of the month's returns (see ``starting_values``); a month without zero returns starts at least squares.

    With no zero return the likelihood is that of a regression of R on the
    region intercepts -alpha_k and R_m, so the bounded least-squares fit
    (an intercept past its bound held at zero and the rest refitted) with
    sigma^2 = Q / n is the maximum itself, or next to it. In the "mixed"
    form, where the regions follow the market's sign, a month with zero
    returns starts there too, its thresholds moved apart by ``MIXED_WIDTH``
    times the half-width of the moments (sigma Phi^{-1}((1 + z) / 2), sigma
    the least-squares one): the moments' beta ignores the two intercepts,
    which the market's sign sets apart. On the bench panel this start takes
    a quarter fewer iterations (widths of 0.5 to 4 tried, 2 the fewest); in
    the "Y-split" form, where both intercepts of the non-zero returns' fit
    mostly sit on their bounds, it saves little and wider starts cost more.
    """
    from scipy.special import ndtri  # imported here: a clean or bars job reads the registry without scipy

    n, sr, sx, srr, srx, sxx = data.stats.sum(axis=0)  # the non-zero returns of both regions
    count = np.maximum(n, 1.0)
    mx, my = sx / count, sr / count
    cxx, cxy = sxx - n * mx * mx, srx - n * mx * my
    beta = np.where(cxx > 0, cxy / np.where(cxx > 0, cxx, 1.0), 0.0)
    sigma = np.sqrt(np.maximum(srr - 2.0 * beta * srx + beta * beta * sxx, 0.0) / count)
    sigma = np.where(sigma > 0, sigma, 0.01)
    zeros = np.bincount(data.zero_month, minlength=data.months)
    z = zeros / np.maximum(n + zeros, 1.0)
    half = sigma * ndtri((1.0 + np.minimum(z, 0.99)) / 2.0)
    theta = np.stack([-half, half, beta, np.log(sigma)])
    # least squares in (alpha_1, alpha_2, beta): n_k alpha_k - sx_k beta = -sr_k, -sum_k sx_k alpha_k + sxx beta = srx
    k_n, k_r, k_x, _, k_rx, k_xx = data.stats.transpose(1, 0, 2)
    system = np.zeros((3, 3, data.months))
    system[0, 0], system[1, 1], system[2, 2] = k_n[0], k_n[1], k_xx.sum(axis=0)
    system[0, 2] = system[2, 0] = -k_x[0]
    system[1, 2] = system[2, 1] = -k_x[1]
    rhs = np.stack([-k_r[0], -k_r[1], k_rx.sum(axis=0)])
    free = np.stack([k_n[0] > 0, k_n[1] > 0, np.ones(data.months, dtype=bool)])
    fit, failed = _masked_solve(system, rhs, free)
    free &= np.stack([fit[0] <= 0.0, fit[1] >= 0.0, free[2]])  # the bounds alpha_1 <= 0 <= alpha_2
    fit, again = _masked_solve(system, rhs, free)
    q = _squares(data.stats, fit[:2], fit[2]).sum(axis=0)
    fits = ~failed & ~again & (q > 0) & (n > 0)
    use = fits & ((zeros == 0) | (form == "mixed"))
    theta[:3, use] = fit[:, use]
    theta[3, use] = 0.5 * np.log(q[use] / n[use])
    if form == "mixed":
        wide = use & (zeros > 0)
        width = MIXED_WIDTH * np.exp(theta[3, wide]) * ndtri((1.0 + np.minimum(z[wide], 0.99)) / 2.0)
        theta[0, wide] -= width
        theta[1, wide] += width
    return theta


def starting_values(ret, market, valid) -> np.ndarray:
    """beta from OLS on the non-zero returns, sigma their residual sd, alpha_2 = -alpha_1 = sigma Phi^{-1}((1 + z) / 2).

    Padded (days, months) arrays; z is the month's share of zero returns.
    """
    return _starting_values(LotData.build(ret, market, regions(np.asarray(ret), np.asarray(market), "ysplit"), valid))


ROUNDING = 1e-15  # relative rounding of a month's log-likelihood: a rise predicted below it cannot be checked


def _gradient_small(theta: np.ndarray, grad: np.ndarray) -> np.ndarray:
    """The gradient, projected on the bounds and scaled by sigma for the alphas, below 1e-4 in every component."""
    sigma = np.exp(theta[3])  # a bound that holds a threshold at zero against its gradient takes no part
    return ((np.abs(grad[0]) * sigma < 1e-4) | ((theta[0] >= 0.0) & (grad[0] > 0.0))) & (
        (np.abs(grad[1]) * sigma < 1e-4) | ((theta[1] <= 0.0) & (grad[1] < 0.0))) & (
        np.abs(grad[2]) < 1e-4) & (np.abs(grad[3]) < 1e-4)


def _cholesky_solve(system: np.ndarray, rhs: np.ndarray, *, packed: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """Solve every month's symmetric (k, k) system (``system`` (k, k, months), ``rhs`` (k, months)) by Cholesky at once.

    Returns the solutions (k, months) and the months whose system is not
    positive definite (their solution is left unspecified). Whole-array
    operations over the months, a few dozen for k = 4, instead of one small
    LAPACK call per month. ``packed=True``: a 4 x 4 ``system`` given by its
    upper triangle (10, months), rows in the order of ``UPPER``.
    """
    k, months = rhs.shape
    entry = (lambda i, j: system[PACKED[i, j]]) if packed else (lambda i, j: system[i, j])
    low = [[None] * k for _ in range(k)]
    failed = np.zeros(months, dtype=bool)

    def dot(pairs) -> np.ndarray | float:
        terms = list(pairs)
        total = terms[0] if terms else 0.0  # the first product itself: no array of zeros to add it to
        for term in terms[1:]:
            total = total + term
        return total

    for j in range(k):
        pivot = entry(j, j) - dot(low[j][p] ** 2 for p in range(j))
        failed |= ~(pivot > 0)
        low[j][j] = np.sqrt(np.where(pivot > 0, pivot, 1.0))
        for i in range(j + 1, k):
            low[i][j] = (entry(i, j) - dot(low[i][p] * low[j][p] for p in range(j))) / low[j][j]
    y = [None] * k
    for i in range(k):
        y[i] = (rhs[i] - dot(low[i][p] * y[p] for p in range(i))) / low[i][i]
    x = [None] * k
    for i in reversed(range(k)):
        x[i] = (y[i] - dot(low[p][i] * x[p] for p in range(i + 1, k))) / low[i][i]
    return np.stack(x), failed


def _masked_solve(system: np.ndarray, rhs: np.ndarray, free: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``_cholesky_solve`` with the unknowns not ``free`` (k, months) held at zero: their rows and columns leave the system."""
    k = system.shape[0]
    if not free.all():
        system = np.where(free[:, None] & free[None, :], system, np.eye(k)[:, :, None])
        rhs = np.where(free, rhs, 0.0)
    return _cholesky_solve(system, rhs)


def _newton_step(theta, grad, hess, damping):
    """The damped Newton step of each month (``hess`` packed, (10, months); see ``evaluate``), projected on the bounds."""
    system = -hess
    system[DIAGONAL] += damping * (np.abs(hess[DIAGONAL]) + 1e-12)
    rhs = grad
    for p, held in ((0, (theta[0] >= 0.0) & (grad[0] > 0.0)), (1, (theta[1] <= 0.0) & (grad[1] < 0.0))):
        if held.any():  # a threshold held at its bound by its gradient stays there: its row and column leave the system
            for q in range(4):
                system[PACKED[p, q]][held] = 1.0 if q == p else 0.0
            rhs = rhs.copy() if rhs is grad else rhs
            rhs[p][held] = 0.0
    step, failed = _cholesky_solve(system, rhs, packed=True)
    if failed.any():  # a system that is not positive definite: LU, or for a singular month the pseudo-inverse step
        stacked, right = np.moveaxis(system[:, failed][PACKED], 2, 0), rhs[:, failed].T[:, :, None]
        try:
            step[:, failed] = np.linalg.solve(stacked, right)[:, :, 0].T
        except np.linalg.LinAlgError:
            step[:, failed] = (np.linalg.pinv(stacked) @ right)[:, :, 0].T
    crossed = np.stack([(theta[0] < 0.0) & (theta[0] + step[0] > 0.0), (theta[1] > 0.0) & (theta[1] + step[1] < 0.0)])
    if crossed.any():  # a threshold the step carries past its bound stops on it, and the other parameters are solved again
        which = np.flatnonzero(crossed.any(axis=0))
        system, rhs, fixed = system[:, which], rhs[:, which].copy(), crossed[:, which]
        for p in (0, 1):
            at = -theta[p, which]  # the step that puts threshold p on its bound
            for q in range(4):
                if q != p:
                    rhs[q] = np.where(fixed[p], rhs[q] - system[PACKED[q, p]] * at, rhs[q])
            for q in range(4):
                system[PACKED[p, q]] = np.where(fixed[p], 1.0 if q == p else 0.0, system[PACKED[p, q]])
            rhs[p] = np.where(fixed[p], at, rhs[p])
        again, failed = _cholesky_solve(system, rhs, packed=True)
        step[:, which] = np.where(failed, step[:, which], again)
    candidate = theta + step
    candidate[0] = np.minimum(candidate[0], 0.0)  # the bounds of LOT (1999): alpha_1 <= 0 <= alpha_2
    candidate[1] = np.maximum(candidate[1], 0.0)
    return candidate


def _iterate(theta, data: LotData, max_iterations, tolerance, damping=None, iterations=None) -> dict[str, np.ndarray]:
    """Damped Newton (Levenberg-Marquardt) steps on the months not yet converged, their state kept compact.

    A month has converged when its next step, undamped (the damping at or
    below its starting value), is below ``tolerance`` relative to sigma
    (alphas, ln sigma) or to 1 (beta) and the rise of the likelihood it
    predicts (g . step) is below ``tolerance`` too: the point is within the
    tolerance of the maximum, and the step is not taken. Otherwise the step is
    tried: accepted where the likelihood does not fall (the damping falls),
    refused elsewhere (the damping rises). A month whose damping passes 1e12
    has stalled. The Hessian is computed with each trial point and kept with
    an accepted one, so an iteration evaluates the likelihood once.
    """
    months = theta.shape[1]
    out_theta, out_ll, out_grad = theta.copy(), np.full(months, -np.inf), np.zeros((4, months))
    iterations = np.zeros(months, dtype=np.int64) if iterations is None else iterations.copy()
    done = np.zeros(months, dtype=bool)
    ll, grad, hess = evaluate(theta, data, hessian=True, packed=True)
    damping = np.full(months, 1e-3) if damping is None else damping.copy()
    out_damping = damping.copy()
    cols = np.arange(months)  # the months still iterating, in the order of the compact state

    def retire(finished: np.ndarray, converged: np.ndarray) -> None:
        nonlocal cols, theta, ll, grad, hess, damping, data
        where = cols[finished]
        out_theta[:, where], out_ll[where], out_grad[:, where] = theta[:, finished], ll[finished], grad[:, finished]
        out_damping[where], done[where] = damping[finished], converged[finished]
        going = np.flatnonzero(~finished)
        cols, theta, ll, grad, hess, damping = cols[going], theta[:, going], ll[going], grad[:, going], hess[:, going], damping[going]
        data = data.subset(going)

    for _ in range(max_iterations + 1):
        if not len(cols):
            break
        candidate = _newton_step(theta, grad, hess, damping)
        step = np.abs(candidate - theta)
        size = np.maximum(np.maximum(step[0], step[1]) / np.exp(theta[3]), np.maximum(step[2], step[3]))  # alphas by sigma
        gain = np.abs((grad * (candidate - theta)).sum(axis=0))  # the rise of the likelihood the step predicts
        small = (size < tolerance) & (gain < tolerance) & (damping <= 1e-3)
        rounding = ~small & (gain < ROUNDING * (1.0 + np.abs(ll)))  # a rise below the rounding: the gradient decides
        if rounding.any():
            small[rounding] = _gradient_small(theta[:, rounding], grad[:, rounding])
        small &= np.isfinite(ll)
        stalled = damping > 1e12
        out_of_turns = iterations[cols] >= max_iterations
        if (small | stalled | out_of_turns).any():
            finished = small | stalled | out_of_turns
            retire(finished, small | stalled)
            if not len(cols):
                break
            candidate = candidate[:, ~finished]
        new_ll, new_grad, new_hess = evaluate(candidate, data, hessian=True, packed=True)
        better = np.isfinite(new_ll) & (new_ll >= ll)
        iterations[cols] += 1
        if better.all():
            theta, ll, grad, hess = candidate, new_ll, new_grad, new_hess
        else:
            theta = np.where(better, candidate, theta)
            ll = np.where(better, new_ll, ll)
            grad = np.where(better, new_grad, grad)
            hess = np.where(better, new_hess, hess)
        damping = np.where(better, np.maximum(damping / 3.0, 1e-9), damping * 4.0)
    if len(cols):
        retire(np.ones(len(cols), dtype=bool), np.zeros(len(cols), dtype=bool))
    theta, ll, grad = out_theta, out_ll, out_grad
    converged = done & _gradient_small(theta, grad) & np.isfinite(ll)
    return {
        "alpha_1": theta[0], "alpha_2": theta[1], "beta": theta[2], "sigma": np.exp(theta[3]),
        "log_likelihood": ll, "iterations": iterations, "converged": converged,
        "_theta": theta, "_damping": out_damping, "_done": done,  # the state a later call resumes from
    }
