"""Lesmond, Ogden & Trzcinka (1999) limited-dependent-variable estimate of the round-trip cost ("LOT").

Model (LOT 1999): the true return is R*_t = beta R_m,t + e_t, e_t ~ N(0,
sigma^2); an informed marginal trader trades only when the value of the
information exceeds the cost, so with a sell threshold alpha_1 < 0 and a buy
threshold alpha_2 > 0 the observed return is

    R_t = R*_t - alpha_1  if R*_t < alpha_1   (region 1)
    R_t = 0               if alpha_1 <= R*_t <= alpha_2   (region 0)
    R_t = R*_t - alpha_2  if R*_t > alpha_2   (region 2)

and the round-trip cost is alpha_2 - alpha_1. The log-likelihood of a
security-month is

    sum_{region 1} ln phi((R + alpha_1 - beta R_m) / sigma) - ln sigma
  + sum_{region 2} ln phi((R + alpha_2 - beta R_m) / sigma) - ln sigma
  + sum_{region 0} ln[Phi((alpha_2 - beta R_m) / sigma) - Phi((alpha_1 - beta R_m) / sigma)].

Goyenko, Holden & Trzcinka (2009) name two ways of assigning the non-zero
returns to regions (from memory): "mixed", LOT's original, by the sign of
the market return (region 1 where R_m < 0, region 2 where R_m >= 0), and
"Y-split", by the sign of the security's own return (region 1 where R < 0,
region 2 where R > 0).

The thresholds are bounded, alpha_1 <= 0 <= alpha_2 (LOT 1999: a sell and a
buy threshold), so a month without zero returns has the cost 0 rather than
the negative difference of two free intercepts.

Fit: maximum likelihood for every security-month at once. The months are
padded to (days x months) arrays with a mask and reduced once to what the
likelihood needs (``LotData``: six sums per region and month for the
non-zero returns, whose terms are quadratic in the parameters, and the zero
returns one by one); each iteration computes the analytic gradient and
Hessian of every month's log-likelihood and a
Levenberg-Marquardt step per month (a 4 x 4 solve, batched), projected onto
the bounds, accepted where the likelihood rises (the damping falls) and
refused elsewhere (the damping rises). A month has converged when its
largest scaled step and its likelihood change are below the tolerances and
its gradient (projected on the bounds) is near zero. The loop runs over
iterations only, on the months not yet converged.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import polars as pl

from liqpanel.contracts import require_columns
from liqpanel.errors import ConfigError

KEY = ["security", "month"]
FORMS = ("mixed", "ysplit")
LOG_ROOT_2PI = 0.5 * np.log(2.0 * np.pi)
MIN_RETURNS = 5  # fewest returns for four parameters and a variance (convention of this project)


def _log_interval(lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """ln(Phi(hi) - Phi(lo)) accurately in both tails; -inf where hi <= lo."""
    from scipy.special import log_ndtr  # imported here: a clean or bars job reads the registry without scipy

    upper = lo > 0  # both in the upper tail: Phi(hi) - Phi(lo) = Phi(-lo) - Phi(-hi)
    a = np.where(upper, log_ndtr(-lo), log_ndtr(hi))
    b = np.where(upper, log_ndtr(-hi), log_ndtr(lo))
    with np.errstate(divide="ignore", invalid="ignore"):
        out = a + np.log1p(-np.exp(b - a))
    return np.where(hi > lo, out, -np.inf)


def regions(ret: np.ndarray, market: np.ndarray, form: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Masks of regions 0, 1 and 2 (see the module docstring) for ``form`` "mixed" or "ysplit"."""
    zero = ret == 0
    below = market < 0 if form == "mixed" else ret < 0
    return zero, ~zero & below, ~zero & ~below


@dataclass(frozen=True)
class LotData:
    """What the likelihood needs of the months: sums over the non-zero returns of each region, and the zero returns.

    The non-zero returns enter the likelihood through a quadratic in the
    parameters, so six sums per region and month (count, sum R, sum R_m,
    sum R^2, sum R R_m, sum R_m^2; ``stats`` of shape (2, 6, months)) replace
    them; only the zero returns (their market return ``zero_market`` and
    month ``zero_month``) need the normal distribution at every iteration.
    """

    stats: np.ndarray
    zero_market: np.ndarray
    zero_month: np.ndarray

    @classmethod
    def build(cls, ret, market, masks, valid) -> "LotData":
        zero, one, two = (m & valid for m in masks)
        sums = []
        for region in (one, two):
            r, x = np.where(region, ret, 0.0), np.where(region, market, 0.0)
            sums.append([region.sum(axis=0), r.sum(axis=0), x.sum(axis=0), (r * r).sum(axis=0), (r * x).sum(axis=0),
                         (x * x).sum(axis=0)])
        day, month = np.nonzero(zero)
        return cls(np.asarray(sums, dtype=float), market[day, month], month)

    @property
    def months(self) -> int:
        return self.stats.shape[2]

    def subset(self, cols: np.ndarray) -> "LotData":
        position = np.full(self.months, -1)
        position[cols] = np.arange(len(cols))
        where = position[self.zero_month]
        keep = where >= 0
        return LotData(self.stats[:, :, cols], self.zero_market[keep], where[keep])


def log_likelihood(theta: np.ndarray, ret, market, masks, valid, *, hessian: bool = False):
    """Each month's log-likelihood, its gradient and (``hessian=True``) its Hessian; see ``evaluate``."""
    return evaluate(theta, LotData.build(ret, market, masks, valid), hessian=hessian)


def evaluate(theta: np.ndarray, data: LotData, *, hessian: bool = False):
    """Each month's log-likelihood, its gradient and (``hessian=True``) its Hessian in (alpha_1, alpha_2, beta, ln sigma).

    ``theta`` has shape (4, months); the gradient (4, months), the Hessian
    (months, 4, 4). Non-zero returns of region k contribute -n_k ln sigma -
    Q_k / (2 sigma^2) with Q_k = sum (R + alpha_k - beta R_m)^2, expanded in
    the region's sums. A zero return contributes ln D with l = (alpha_1 -
    beta R_m) / sigma, h = (alpha_2 - beta R_m) / sigma, D = Phi(h) -
    Phi(l), u = phi(h) / D, v = phi(l) / D: d ln D / dp = u h_p - v l_p and
    d^2 ln D / dp dq = -h u h_p h_q + u h_pq + l v l_p l_q - v l_pq - g_p g_q.
    """
    a1, a2, beta, log_s = theta
    months = theta.shape[1]
    var = np.exp(2.0 * log_s)
    n, sr, sx, srr, srx, sxx = data.stats.transpose(1, 0, 2)  # each (2, months): regions 1 and 2
    a = np.stack([a1, a2])
    q = srr + n * a * a + beta * beta * sxx + 2.0 * a * sr - 2.0 * beta * srx - 2.0 * a * beta * sx
    moved = n.sum(axis=0)
    ll = -moved * (log_s + LOG_ROOT_2PI) - q.sum(axis=0) / (2.0 * var)
    d_a = -(n * a + sr - beta * sx) / var  # (2, months)
    d_b = -(beta * sxx - srx - a * sx).sum(axis=0) / var
    d_t = -moved + q.sum(axis=0) / var
    # zero returns, one entry each
    m, x = data.zero_month, data.zero_market
    s = np.exp(log_s)[m]
    lo, hi = (a1[m] - beta[m] * x) / s, (a2[m] - beta[m] * x) / s
    log_d = _log_interval(lo, hi)
    u = np.exp(-0.5 * hi * hi - LOG_ROOT_2PI - log_d)
    v = np.exp(-0.5 * lo * lo - LOG_ROOT_2PI - log_d)
    inv = 1.0 / s
    zeros = np.zeros_like(x)
    l_p = np.stack([inv, zeros, -x * inv, -lo])
    h_p = np.stack([zeros, inv, -x * inv, -hi])
    g_zero = u * h_p - v * l_p

    def total(values: np.ndarray) -> np.ndarray:
        return np.bincount(m, weights=values, minlength=months)

    ll = ll + total(log_d)
    grad = np.stack([d_a[0], d_a[1], d_b, d_t]) + np.stack([total(g) for g in g_zero])
    grad = np.nan_to_num(grad, nan=0.0, posinf=0.0, neginf=0.0)
    if not hessian:
        return ll, grad
    h = np.zeros((months, 4, 4))
    h[:, 0, 0], h[:, 1, 1] = -n[0] / var, -n[1] / var
    h[:, 0, 2], h[:, 1, 2] = sx[0] / var, sx[1] / var
    h[:, 2, 2] = -sxx.sum(axis=0) / var
    h[:, 0, 3], h[:, 1, 3], h[:, 2, 3] = -2.0 * d_a[0], -2.0 * d_a[1], -2.0 * d_b
    h[:, 3, 3] = -2.0 * q.sum(axis=0) / var
    for i in range(4):
        for j in range(i, 4):
            term = -hi * u * h_p[i] * h_p[j] + lo * v * l_p[i] * l_p[j] - g_zero[i] * g_zero[j]
            h[:, i, j] += total(term)
    # second derivatives of l and h: l_{a1,t} = -1/s, l_{b,t} = X/s, l_{t,t} = l (and h alike with alpha_2)
    h[:, 0, 3] += total(v * inv)
    h[:, 1, 3] -= total(u * inv)
    h[:, 2, 3] += total((u - v) * x * inv)
    h[:, 3, 3] += total(u * hi - v * lo)
    lower = np.tril_indices(4, -1)
    h[:, lower[0], lower[1]] = h[:, lower[1], lower[0]]
    return ll, grad, np.nan_to_num(h)


def starting_values(ret, market, valid) -> np.ndarray:
    """beta from OLS on the non-zero returns, sigma their residual sd, alpha_2 = -alpha_1 = sigma Phi^{-1}((1 + z) / 2)."""
    from scipy.special import ndtri  # imported here: a clean or bars job reads the registry without scipy

    moved = valid & (ret != 0)
    n = np.maximum(moved.sum(axis=0), 1)
    mx = np.where(moved, market, 0).sum(axis=0) / n
    my = np.where(moved, ret, 0).sum(axis=0) / n
    sxx = np.where(moved, (market - mx) ** 2, 0).sum(axis=0)
    sxy = np.where(moved, (market - mx) * (ret - my), 0).sum(axis=0)
    beta = np.where(sxx > 0, sxy / np.where(sxx > 0, sxx, 1.0), 0.0)
    resid = np.where(moved, ret - beta * market, 0.0)
    sigma = np.sqrt((resid**2).sum(axis=0) / n)
    sigma = np.where(sigma > 0, sigma, 0.01)
    z = (valid & (ret == 0)).sum(axis=0) / np.maximum(valid.sum(axis=0), 1)
    half = sigma * ndtri((1.0 + np.minimum(z, 0.99)) / 2.0)
    return np.stack([-half, half, beta, np.log(sigma)])


def fit_lot(ret: np.ndarray, market: np.ndarray, valid: np.ndarray, *, form: str = "ysplit", max_iterations: int = 200,
            tolerance: float = 1e-8) -> dict[str, np.ndarray]:
    """Maximum-likelihood fit of every month (columns of the (days, months) arrays) at once.

    Returns ``alpha_1``, ``alpha_2``, ``beta``, ``sigma``, ``log_likelihood``,
    ``iterations`` and ``converged`` per month (module docstring for the
    method). ``tolerance``: on the largest step relative to sigma (alphas,
    ln sigma) or to 1 (beta), and on the change of the log-likelihood.
    """
    if form not in FORMS:
        raise ConfigError(f"LOT: `form` must be one of {FORMS}, got {form!r}")
    ret = np.where(valid, ret, 0.0)
    market = np.where(valid, market, 0.0)
    masks = regions(ret, market, form)
    theta = starting_values(ret, market, valid)
    with np.errstate(all="ignore"):  # trial steps may leave the domain; their likelihood is -inf and they are refused
        return _iterate(theta, LotData.build(ret, market, masks, valid), max_iterations, tolerance)


def _iterate(theta, all_data: LotData, max_iterations, tolerance) -> dict[str, np.ndarray]:
    months = theta.shape[1]
    ll, grad = evaluate(theta, all_data)
    damping = np.full(months, 1e-3)
    done = np.zeros(months, dtype=bool)
    iterations = np.zeros(months, dtype=np.int64)
    eye = np.eye(4)
    for _ in range(max_iterations):
        active = ~done
        if not active.any():
            break
        cols = np.flatnonzero(active)
        th, data = theta[:, cols], (all_data if len(cols) == months else all_data.subset(cols))
        g = grad[:, cols]
        scale = np.stack([np.exp(th[3])] * 2 + [np.ones(len(cols)), np.ones(len(cols))])  # sigma for the alphas
        hessian = evaluate(th, data, hessian=True)[2]
        curvature = np.abs(np.diagonal(hessian, axis1=1, axis2=2)) + 1e-12
        system = -hessian + damping[cols, None, None] * curvature[:, :, None] * eye
        # a threshold held at its bound by its gradient stays there: its row and column leave the system
        held = np.zeros((len(cols), 4), dtype=bool)
        held[:, 0] = (th[0] >= 0.0) & (g[0] > 0.0)
        held[:, 1] = (th[1] <= 0.0) & (g[1] < 0.0)
        free = ~held
        system = np.where(free[:, :, None] & free[:, None, :], system, eye)
        rhs = np.where(free, g.T, 0.0)[:, :, None]
        try:
            step = np.linalg.solve(system, rhs)[:, :, 0].T
        except np.linalg.LinAlgError:  # a singular month: the pseudo-inverse step
            step = (np.linalg.pinv(system) @ rhs)[:, :, 0].T
        candidate = th + step
        candidate[0] = np.minimum(candidate[0], 0.0)  # the bounds of LOT (1999): alpha_1 <= 0 <= alpha_2
        candidate[1] = np.maximum(candidate[1], 0.0)
        step = candidate - th
        new_ll, new_grad = evaluate(candidate, data)
        better = np.isfinite(new_ll) & (new_ll >= ll[cols])
        iterations[cols] += 1
        size = np.max(np.abs(step) / scale, axis=0)
        change = np.where(better, new_ll - ll[cols], 0.0)
        theta[:, cols] = np.where(better, candidate, th)
        ll[cols] = np.where(better, new_ll, ll[cols])
        grad[:, cols] = np.where(better, new_grad, g)
        damping[cols] = np.where(better, np.maximum(damping[cols] / 3.0, 1e-9), damping[cols] * 4.0)
        finished = better & (size < tolerance) & (change < tolerance)
        stalled = damping[cols] > 1e12
        done[cols] = finished | stalled
    projected = grad.copy()  # a bound that holds a threshold at zero against its gradient takes no part
    projected[0] = np.where((theta[0] >= 0.0) & (grad[0] > 0.0), 0.0, grad[0])
    projected[1] = np.where((theta[1] <= 0.0) & (grad[1] < 0.0), 0.0, grad[1])
    gradient_small = np.max(np.abs(projected) * np.stack([np.exp(theta[3])] * 2 + [np.ones(months)] * 2), axis=0) < 1e-4
    converged = done & gradient_small & np.isfinite(ll)
    return {
        "alpha_1": theta[0], "alpha_2": theta[1], "beta": theta[2], "sigma": np.exp(theta[3]),
        "log_likelihood": ll, "iterations": iterations, "converged": converged,
    }


def lot_cost(daily: pl.LazyFrame, *, form: str = "ysplit", max_iterations: int = 200, tolerance: float = 1e-8) -> pl.LazyFrame:
    """LOT round-trip cost alpha_2 - alpha_1 per security-month (module docstring), "mixed" or "Y-split".

    Data: the month's daily simple returns ``ret`` and the market return
    ``mkt_ret`` (the equal-weighted return of the input, added by the
    measures stage when absent); days with either missing are left out.
    Units: proportional round-trip cost (0.01 = 1%). Outputs
    ``lot_<form>`` (the cost), ``lot_<form>_converged`` (1 when the fit
    converged, else 0, and the cost is then missing with the reason
    "not_converged") and ``lot_<form>_iterations``; ``n_obs`` returns used;
    "too_few_returns" below ``MIN_RETURNS``.

    Assumptions: normal errors, constant beta and sigma within the month,
    zero returns only from trading costs. Sources: Lesmond, D. A., Ogden, J.
    P. & Trzcinka, C. A. (1999), "A new estimate of transaction costs",
    Review of Financial Studies 12(5), 1113-1141; Goyenko, Holden &
    Trzcinka (2009), Journal of Financial Economics 92(2) (the two forms,
    from memory).
    """
    if form not in FORMS:
        raise ConfigError(f"measure 'lot_{form}': option `form` must be one of {FORMS}")
    require_columns(daily, ["security", "month", "date", "ret", "mkt_ret"], table="daily")
    name = f"lot_{form}"
    ok = pl.col("ret").is_finite() & pl.col("mkt_ret").is_finite()
    frame = (
        daily.select(*KEY, "date", "ret", "mkt_ret")
        .sort("security", "month", "date")
        .with_columns(ok.fill_null(False).alias("_ok"))
        .with_columns(pl.col("_ok").cum_sum().over(KEY).alias("_pos"))
        .collect(engine="in-memory")
    )
    months = frame.group_by(KEY, maintain_order=True).agg(pl.col("_ok").sum().cast(pl.Int64).alias("n_obs"))
    fitted = months.filter(pl.col("n_obs") >= MIN_RETURNS).with_row_index("_g")
    rows = frame.filter(pl.col("_ok")).join(fitted.select(*KEY, "_g"), on=KEY, how="inner")
    cost = np.full(fitted.height, np.nan)
    converged = np.zeros(fitted.height)
    iterations = np.zeros(fitted.height)
    if fitted.height:
        days = int(fitted["n_obs"].max())
        shape = (days, fitted.height)
        at = (rows["_pos"].to_numpy() - 1, rows["_g"].to_numpy())
        ret, market, valid = np.zeros(shape), np.zeros(shape), np.zeros(shape, dtype=bool)
        ret[at], market[at], valid[at] = rows["ret"].to_numpy(), rows["mkt_ret"].to_numpy(), True
        fit = fit_lot(ret, market, valid, form=form, max_iterations=max_iterations, tolerance=tolerance)
        cost = np.where(fit["converged"], fit["alpha_2"] - fit["alpha_1"], np.nan)
        converged = fit["converged"].astype(float)
        iterations = fit["iterations"].astype(float)
    estimates = fitted.select(*KEY, pl.Series(name, cost, nan_to_null=True), pl.Series(f"{name}_converged", converged),
                              pl.Series(f"{name}_iterations", iterations))
    return (
        months.join(estimates, on=KEY, how="left", maintain_order="left")
        .with_columns(
            pl.when(pl.col("n_obs") < MIN_RETURNS).then(pl.lit("too_few_returns"))
            .when(pl.col(name).is_null()).then(pl.lit("not_converged"))
            .otherwise(None).cast(pl.String).alias("reason")
        )
        .select(*KEY, name, f"{name}_converged", f"{name}_iterations", "n_obs", "reason")
        .sort(KEY)
        .lazy()
    )


def lot_mixed(daily: pl.LazyFrame, **options) -> pl.LazyFrame:
    """LOT "mixed": regions of the non-zero returns by the sign of the market return (see ``lot_cost``)."""
    return lot_cost(daily, form="mixed", **options)


def lot_ysplit(daily: pl.LazyFrame, **options) -> pl.LazyFrame:
    """LOT "Y-split": regions of the non-zero returns by the sign of the security's return (see ``lot_cost``)."""
    return lot_cost(daily, form="ysplit", **options)


__all__ = ["FORMS", "LotData", "evaluate", "fit_lot", "log_likelihood", "lot_cost", "lot_mixed", "lot_ysplit", "regions", "starting_values"]
