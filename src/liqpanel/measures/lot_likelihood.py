"""The LOT (Lesmond, Ogden & Trzcinka 1999) log-likelihood of every security-month at once, with its gradient
and Hessian (the model and the fit are described in ``liqpanel.measures.lot``)."""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np


LOG_ROOT_2PI = 0.5 * np.log(2.0 * np.pi)


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
