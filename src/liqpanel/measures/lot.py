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

Fit: maximum likelihood for every security-month at once. The months'
valid days are rows in month order, reduced once to what the likelihood
needs (``LotData``: six sums per region and month for the non-zero returns,
whose terms are quadratic in the parameters, and the zero returns one by
one). Starting values come from moments (a month without zero returns
starts at its bounded least-squares fit, which is its maximum or next to
it). Each iteration is one batched damped Newton (Levenberg-Marquardt) step
for every month not yet converged: the analytic Hessian, a 4 x 4 Cholesky
solve written over whole arrays of months, a threshold the step would
carry past its bound stopped on it and the other parameters solved again
with it held there (a projection alone gives a step the likelihood often
refuses), then accepted where the likelihood does not fall (the damping falls)
or refused (it rises); the likelihood, gradient and Hessian are evaluated
once per iteration, at the trial point, every per-return term summed per
month in one pass. A month has converged when its next step is below the
tolerance and the rise it predicts too (or below the rounding of its
log-likelihood) and its gradient, projected on the bounds, is near zero.
The loop runs over iterations only, on a compact state of the months still
iterating, for ``CHUNK_MONTHS`` months at a time (their arrays stay in the
processor's cache); after ``FIRST_TURNS`` iterations the few months of every
piece still going continue together from the state they stopped in, so the
iterates are those of one batch.
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import polars as pl

from liqpanel.core.contracts import require_columns
from liqpanel.core.errors import ConfigError
from liqpanel.measures.neighbours import FIRST_OF_MONTH, in_security_date_order

KEY = ["security", "month"]
FORMS = ("mixed", "ysplit")
LOG_ROOT_2PI = 0.5 * np.log(2.0 * np.pi)
MIN_RETURNS = 5  # fewest returns for four parameters and a variance (convention of this project)
CHUNK_MONTHS = 16384  # months fitted together: their working arrays stay in the processor's cache
FIRST_TURNS = 8  # iterations of a piece of months; the months still going then continue together
RESULTS = ("alpha_1", "alpha_2", "beta", "sigma", "log_likelihood", "iterations", "converged")


def _log_interval(lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """ln(Phi(hi) - Phi(lo)) accurately in both tails; -inf where hi <= lo.

    Where both lie in the upper tail the interval is reflected, Phi(hi) -
    Phi(lo) = Phi(-lo) - Phi(-hi), so each entry needs two ``log_ndtr``.
    """
    from scipy.special import log_ndtr  # imported here: a clean or bars job reads the registry without scipy

    upper = lo > 0
    a = log_ndtr(np.where(upper, -lo, hi))
    b = log_ndtr(np.where(upper, -hi, lo))
    with np.errstate(divide="ignore", invalid="ignore"):
        out = a + np.log1p(-np.exp(b - a))
    return np.where(hi > lo, out, -np.inf)


def regions(ret: np.ndarray, market: np.ndarray, form: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Masks of regions 0, 1 and 2 (see the module docstring) for ``form`` "mixed" or "ysplit"."""
    zero = ret == 0
    below = market < 0 if form == "mixed" else ret < 0
    return zero, ~zero & below, ~zero & ~below


def _as_rows(valid: np.ndarray):
    """Pick the valid entries of padded (days, months) arrays as rows in month order; also each row's month."""
    month, day = np.nonzero(np.asarray(valid, dtype=bool).T)
    return (lambda values: np.asarray(values)[day, month]), month


def _month_totals(terms: np.ndarray, month: np.ndarray, months: int) -> np.ndarray:
    """Per-row ``terms`` (k, rows) summed per month: (k, months), zero for a month without rows.

    One ``bincount`` a term: a pass over the rows, where a ``reduceat`` over
    the runs of each month pays a call of its inner loop per month and term.
    """
    out = np.empty((terms.shape[0], months))
    for row, values in zip(out, terms):
        row[:] = np.bincount(month, weights=values, minlength=months)
    return out


@dataclass(frozen=True)
class LotData:
    """What the likelihood needs of the months: sums over the non-zero returns of each region, and the zero returns.

    The non-zero returns enter the likelihood through a quadratic in the
    parameters, so six sums per region and month (count, sum R, sum R_m,
    sum R^2, sum R R_m, sum R_m^2; ``stats`` of shape (2, 6, months)) replace
    them; only the zero returns (their market return ``zero_market`` and
    month ``zero_month``, in month order) need the normal distribution at
    every iteration.
    """

    stats: np.ndarray
    zero_market: np.ndarray
    zero_month: np.ndarray

    @classmethod
    def from_rows(cls, ret, market, month, months: int, masks) -> "LotData":
        """From one row per valid day in month order (``month`` numbers the months 0..) and the region masks."""
        zero, one, two = masks
        key = 3 * month + one + 2 * two  # (month, region) cells; region 0's are dropped
        sums = [np.bincount(key, weights=w, minlength=3 * months).reshape(months, 3)[:, 1:].T
                for w in (None, ret, market, ret * ret, ret * market, market * market)]
        return cls(np.stack(sums, axis=1).astype(float), market[zero], month[zero])

    @classmethod
    def build(cls, ret, market, masks, valid) -> "LotData":
        """From padded (days, months) arrays, the region masks (``regions``) and the mask of valid days."""
        pick, month = _as_rows(valid)
        masks = tuple(pick(m).astype(bool) for m in masks)
        return cls.from_rows(pick(ret).astype(float), pick(market).astype(float), month, np.shape(valid)[1], masks)

    @property
    def months(self) -> int:
        return self.stats.shape[2]

    @cached_property
    def totals(self) -> np.ndarray:
        """Count, sum R^2, sum R R_m and sum R_m^2 over the non-zero returns of both regions: (4, months)."""
        return self.stats.sum(axis=0)[[0, 3, 4, 5]]

    @classmethod
    def concat(cls, parts: list["LotData"]) -> "LotData":
        """The months of ``parts`` one after the other."""
        offsets = np.cumsum([0, *[part.months for part in parts[:-1]]])
        return cls(np.concatenate([part.stats for part in parts], axis=2),
                   np.concatenate([part.zero_market for part in parts]),
                   np.concatenate([part.zero_month + offset for part, offset in zip(parts, offsets)]))

    def subset(self, cols: np.ndarray) -> "LotData":
        """The months ``cols`` (ascending), renumbered 0..len(cols) - 1."""
        position = np.full(self.months, -1)
        position[cols] = np.arange(len(cols))
        where = position[self.zero_month]
        keep = where >= 0
        return LotData(self.stats[:, :, cols], self.zero_market[keep], where[keep])


def log_likelihood(theta: np.ndarray, ret, market, masks, valid, *, hessian: bool = False):
    """Each month's log-likelihood, its gradient and (``hessian=True``) its Hessian; see ``evaluate``."""
    return evaluate(theta, LotData.build(ret, market, masks, valid), hessian=hessian)


UPPER = np.triu_indices(4)
PACKED = np.zeros((4, 4), dtype=np.intp)  # row of entry (p, q) in the packed Hessian: its upper triangle in UPPER order
PACKED[UPPER] = PACKED[UPPER[::-1]] = np.arange(len(UPPER[0]))
DIAGONAL = PACKED[np.arange(4), np.arange(4)]


def _squares(stats: np.ndarray, a: np.ndarray, beta: np.ndarray) -> np.ndarray:
    """Q_k = sum over region k's non-zero returns of (R + alpha_k - beta R_m)^2 from its sums; ``a`` (2, months)."""
    n, sr, sx, srr, srx, sxx = stats.transpose(1, 0, 2)
    return srr + n * a * a + beta * beta * sxx + 2.0 * a * sr - 2.0 * beta * srx - 2.0 * a * beta * sx


def evaluate(theta: np.ndarray, data: LotData, *, hessian: bool = False, months_last: bool = False,
             packed: bool = False):
    """Each month's log-likelihood, its gradient and (``hessian=True``) its Hessian in (alpha_1, alpha_2, beta, ln sigma).

    ``theta`` has shape (4, months); the gradient (4, months), the Hessian
    (months, 4, 4). Non-zero returns of region k contribute -n_k ln sigma -
    Q_k / (2 sigma^2) with Q_k = sum (R + alpha_k - beta R_m)^2, expanded in
    the region's sums: with w_k = sum R - beta sum R_m and e_k = w_k + n_k
    alpha_k (the sum of the region's residuals), Q_k = sum (R - beta R_m)^2 +
    alpha_k (w_k + e_k). A zero return contributes ln D with l = (alpha_1 -
    beta R_m) / sigma, h = (alpha_2 - beta R_m) / sigma, D = Phi(h) -
    Phi(l), u = phi(h) / D, v = phi(l) / D: g_p = d ln D / dp = u h_p - v l_p and
    d^2 ln D / dp dq = -h u h_p h_q + u h_pq + l v l_p l_q - v l_pq - g_p g_q.
    The second derivatives of l and h are nonzero only against ln sigma
    (l_{a1,t} = -1/s, l_{b,t} = X/s, l_{t,t} = l, and h alike with alpha_2),
    which makes u h_pt - v l_pt = -g_p. Every per-return term is summed per
    month (``_month_totals``). ``months_last=True`` gives the Hessian as (4, 4, months);
    ``packed=True`` as its 10 upper entries (10, months) in the order of
    ``UPPER`` (``PACKED`` maps an entry to its row).
    """
    a1, a2, beta, log_s = theta
    months = theta.shape[1]
    inv_var = np.exp(-2.0 * log_s)
    (n1, sr1, sx1, _, _, _), (n2, sr2, sx2, _, _, _) = data.stats  # each (months,): regions 1 and 2
    moved, srr, srx, sxx = data.totals
    w1, w2 = sr1 - beta * sx1, sr2 - beta * sx2
    e1, e2 = w1 + n1 * a1, w2 + n2 * a2
    q = srr - beta * (2.0 * srx - beta * sxx) + a1 * (w1 + e1) + a2 * (w2 + e2)
    # zero returns, one entry each
    m = data.zero_month
    totals = _month_totals(_zero_terms(a1[m], a2[m], beta[m], np.exp(-log_s)[m], data.zero_market, hessian), m, months)
    ll = -moved * (log_s + LOG_ROOT_2PI) - 0.5 * q * inv_var + totals[0]
    own = np.empty((4, months))  # the gradient of the non-zero returns' terms
    np.multiply(e1, -inv_var, out=own[0])
    np.multiply(e2, -inv_var, out=own[1])
    np.multiply(srx - beta * sxx + a1 * sx1 + a2 * sx2, inv_var, out=own[2])
    np.subtract(q * inv_var, moved, out=own[3])
    zero_grad = totals[1:5]
    grad = own + zero_grad
    if not np.isfinite(grad).all():
        grad = np.nan_to_num(grad, nan=0.0, posinf=0.0, neginf=0.0)
    if not hessian:
        return ll, grad
    h = totals[5:]  # the zero returns' entries; the non-zero returns' added in place
    h[DIAGONAL[0]] -= n1 * inv_var
    h[DIAGONAL[1]] -= n2 * inv_var
    h[PACKED[0, 2]] += sx1 * inv_var
    h[PACKED[1, 2]] += sx2 * inv_var
    h[DIAGONAL[2]] -= sxx * inv_var
    h[PACKED[0, 3]] -= 2.0 * own[0] + zero_grad[0]
    h[PACKED[1, 3]] -= 2.0 * own[1] + zero_grad[1]
    h[PACKED[2, 3]] -= 2.0 * own[2] + zero_grad[2]
    h[DIAGONAL[3]] -= 2.0 * q * inv_var + zero_grad[3]
    if not np.isfinite(h).all():
        h = np.nan_to_num(h)
    if packed:
        return ll, grad, h
    h = h[PACKED]  # (4, 4, months)
    return ll, grad, (h if months_last else np.moveaxis(h, 2, 0))


def _zero_terms(a1, a2, beta, inv, x, hessian: bool) -> np.ndarray:
    """Per zero return (parameters already taken at its month): ln D, its gradient and (``hessian``) the 10 upper entries.

    Rows of the result: ln D; g_p for p = alpha_1, alpha_2, beta, ln sigma;
    then d^2 ln D / dp dq in the order of ``UPPER`` (see ``evaluate``),
    written entry by entry: l_p = (1/s, 0, -X/s, -l) and h_p = (0, 1/s,
    -X/s, -h) have zeros and shared factors, so each entry is two or three
    products instead of the full -h u h_p h_q + l v l_p l_q - g_p g_q.
    """
    out = np.empty((15 if hessian else 5, len(x)))
    xi = x * inv
    bx = beta * xi
    lo, hi = a1 * inv - bx, a2 * inv - bx
    log_d = out[0]
    log_d[:] = _log_interval(lo, hi)
    u = np.exp(-0.5 * hi * hi - LOG_ROOT_2PI - log_d)
    v = np.exp(-0.5 * lo * lo - LOG_ROOT_2PI - log_d)
    g0, g1, g2, g3 = out[1:5]
    np.multiply(-v, inv, out=g0)
    np.multiply(u, inv, out=g1)
    np.multiply(v - u, xi, out=g2)
    np.subtract(v * lo, u * hi, out=g3)
    if hessian:
        a, b = -hi * u, lo * v  # the coefficients of h_p h_q and l_p l_q
        a_inv, b_inv, a_xi, b_xi = a * inv, b * inv, a * xi, b * xi
        h00, h01, h02, h03, h11, h12, h13, h22, h23, h33 = out[5:]  # the order of UPPER
        np.subtract(b_inv * inv, g0 * g0, out=h00)
        np.multiply(g0, g1, out=h01)
        np.negative(h01, out=h01)
        np.subtract(b_inv * -xi, g0 * g2, out=h02)
        np.subtract(b_inv * -lo, g0 * g3, out=h03)
        np.subtract(a_inv * inv, g1 * g1, out=h11)
        np.subtract(a_inv * -xi, g1 * g2, out=h12)
        np.subtract(a_inv * -hi, g1 * g3, out=h13)
        np.subtract(a_xi * xi + b_xi * xi, g2 * g2, out=h22)
        np.subtract(a_xi * hi + b_xi * lo, g2 * g3, out=h23)
        np.subtract(a * hi * hi + b * lo * lo, g3 * g3, out=h33)
    return out


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


def fit_lot(ret: np.ndarray, market: np.ndarray, valid: np.ndarray, *, form: str = "ysplit", max_iterations: int = 200,
            tolerance: float = 1e-8) -> dict[str, np.ndarray]:
    """Maximum-likelihood fit of every month (columns of the (days, months) arrays) at once.

    Returns ``alpha_1``, ``alpha_2``, ``beta``, ``sigma``, ``log_likelihood``,
    ``iterations`` and ``converged`` per month (module docstring for the
    method). ``tolerance``: on the largest step relative to sigma (alphas,
    ln sigma) or to 1 (beta), and on the change of the log-likelihood.
    """
    pick, month = _as_rows(valid)
    return fit_rows(pick(ret).astype(float), pick(market).astype(float), month, np.shape(valid)[1], form=form,
                    max_iterations=max_iterations, tolerance=tolerance)


def fit_rows(ret: np.ndarray, market: np.ndarray, month: np.ndarray, months: int, *, form: str = "ysplit",
             max_iterations: int = 200, tolerance: float = 1e-8) -> dict[str, np.ndarray]:
    """``fit_lot`` on one row per valid day, rows in month order, ``month`` numbering the months 0..``months`` - 1."""
    if form not in FORMS:
        raise ConfigError(f"LOT: `form` must be one of {FORMS}, got {form!r}")
    parts, pending = [], []
    first = min(max_iterations, FIRST_TURNS)
    for start in range(0, max(months, 1), CHUNK_MONTHS):  # months are independent: a piece at a time stays in cache
        stop = min(start + CHUNK_MONTHS, months)
        a, b = np.searchsorted(month, [start, stop])
        r, x = ret[a:b], market[a:b]
        data = LotData.from_rows(r, x, month[a:b] - start, stop - start, regions(r, x, form))
        with np.errstate(all="ignore"):  # trial steps may leave the domain; their likelihood is -inf and they are refused
            part = _iterate(_starting_values(data, form), data, first, tolerance)
        left = np.flatnonzero(~part["_done"] & (part["iterations"] >= first)) if max_iterations > first else []
        parts.append(part)
        pending.append((part, left, data.subset(left) if len(left) else None))
    pending = [item for item in pending if len(item[1])]
    if pending:  # the few slow months of every piece go on together, from where they stopped (the same iterates)
        state = {key: np.concatenate([part[key][..., left] for part, left, _ in pending], axis=-1)
                 for key in ("_theta", "_damping", "iterations")}
        with np.errstate(all="ignore"):
            more = _iterate(state["_theta"], LotData.concat([data for _, _, data in pending]), max_iterations, tolerance,
                            damping=state["_damping"], iterations=state["iterations"])
        at = 0
        for part, left, _ in pending:
            for key in RESULTS:
                part[key][left] = more[key][at:at + len(left)]
            at += len(left)
    return {key: np.concatenate([part[key] for part in parts]) for key in RESULTS}


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


@dataclass(frozen=True)
class MonthRows:
    """The daily returns the LOT fits use: ``ret`` and ``market`` of the months fitted, rows in month order.

    ``keys`` holds (security, month) of every security-month of the table,
    ``n_obs`` its returns with both values finite, ``fitted`` the
    security-months with at least ``MIN_RETURNS`` of them and ``month``
    numbers each row's month among those (0..len(fitted) - 1).
    """

    keys: pl.DataFrame
    n_obs: np.ndarray
    fitted: np.ndarray
    ret: np.ndarray
    market: np.ndarray
    month: np.ndarray


_LAST_ROWS: dict[str, object] = {}  # the rows of the last table read, while that table object lives


def _month_rows(daily: pl.LazyFrame) -> MonthRows:
    """The returns of ``daily`` per security-month (``MonthRows``), read once for both forms.

    The measures stage hands one sorted table object to every measure, so the
    second LOT form finds the rows the first read: they are kept, under a
    weak reference to that object, until the object is dropped or another
    table is read. A query plan is immutable, so the same object gives the
    same rows.
    """
    held = _LAST_ROWS.get("table")
    if held is not None and held() is daily:
        return _LAST_ROWS["rows"]
    ok = (pl.col("ret").is_finite() & pl.col("mkt_ret").is_finite()).fill_null(False)
    frame = (
        in_security_date_order(daily)  # a table the measures stage has sorted and flagged is kept as it is
        .select(*KEY, FIRST_OF_MONTH, ok.alias("_ok"), "ret", "mkt_ret")
        .collect(engine="in-memory")
    )
    starts = np.flatnonzero(frame[FIRST_OF_MONTH].to_numpy())  # security-months, in (security, month) order, start here
    used = frame["_ok"].to_numpy()
    n_obs = np.add.reduceat(used.view(np.uint8), starts, dtype=np.int64) if len(starts) else np.zeros(0, dtype=np.int64)
    enough = n_obs >= MIN_RETURNS
    fitted = np.flatnonzero(enough)
    rows = used & np.repeat(enough, np.diff(np.append(starts, len(used))))  # the days used, of the months fitted
    out = MonthRows(frame.filter(pl.col(FIRST_OF_MONTH)).select(KEY), n_obs, fitted, frame["ret"].to_numpy()[rows],
                    frame["mkt_ret"].to_numpy()[rows], np.repeat(np.arange(len(fitted)), n_obs[fitted]))

    def forget(reference) -> None:
        if _LAST_ROWS.get("table") is reference:
            _LAST_ROWS.clear()

    _LAST_ROWS.clear()
    try:
        _LAST_ROWS.update(table=weakref.ref(daily, forget), rows=out)
    except TypeError:  # an object without weak references is read every time
        pass
    return out


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
    rows = _month_rows(daily)
    keys, n_obs, fitted = rows.keys, rows.n_obs, rows.fitted
    cost, converged, iterations = np.full(len(n_obs), np.nan), np.full(len(n_obs), np.nan), np.full(len(n_obs), np.nan)
    if len(fitted):
        fit = fit_rows(rows.ret, rows.market, rows.month, len(fitted), form=form, max_iterations=max_iterations,
                       tolerance=tolerance)
        cost[fitted] = np.where(fit["converged"], fit["alpha_2"] - fit["alpha_1"], np.nan)
        converged[fitted] = fit["converged"]
        iterations[fitted] = fit["iterations"]
    return keys.with_columns(
        pl.Series(name, cost, nan_to_null=True),
        pl.Series(f"{name}_converged", converged, nan_to_null=True),
        pl.Series(f"{name}_iterations", iterations, nan_to_null=True),
        pl.Series("n_obs", n_obs, dtype=pl.Int64),
    ).with_columns(
        pl.when(pl.col("n_obs") < MIN_RETURNS).then(pl.lit("too_few_returns"))
        .when(pl.col(name).is_null()).then(pl.lit("not_converged"))
        .otherwise(None).cast(pl.String).alias("reason")
    ).lazy()


def lot_mixed(daily: pl.LazyFrame, **options) -> pl.LazyFrame:
    """LOT "mixed": regions of the non-zero returns by the sign of the market return (see ``lot_cost``)."""
    return lot_cost(daily, form="mixed", **options)


def lot_ysplit(daily: pl.LazyFrame, **options) -> pl.LazyFrame:
    """LOT "Y-split": regions of the non-zero returns by the sign of the security's return (see ``lot_cost``)."""
    return lot_cost(daily, form="ysplit", **options)


__all__ = ["FORMS", "LotData", "MonthRows", "evaluate", "fit_lot", "log_likelihood", "lot_cost", "lot_mixed", "lot_ysplit", "regions", "starting_values", "fit_rows"]
