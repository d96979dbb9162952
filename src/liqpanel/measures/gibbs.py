"""Hasbrouck's Gibbs sampler for the Roll model, vectorised across security-months.

Model (Roll 1984; Hasbrouck 2004, 2009), on the daily log price changes of
one security within one month:

    dp_t = c (q_t - q_{t-1}) + beta r_m,t + u_t,    u_t ~ N(0, sigma_u^2),

q_t = +1 or -1 (the close of day t is a trade at the ask or the bid), c > 0
the half-spread as a share of the price, beta an optional loading on the
market return. The sampler draws c (and beta), sigma_u^2 and every q_t from
their full conditional distributions; the estimates are posterior means.

The whole sample is processed at once: the months are padded to an array of
(days x security-months) with a mask, and each sweep updates every month
together. Within a sweep the latent signs are drawn in two blocks (even and
odd days): given the odd-day signs, the even-day signs are conditionally
independent, so a block is one vectorised draw. The loop runs over sweeps and
the two blocks only. A large batch is cut into pieces of months whose
arithmetic runs in threads, one per core (``_Pieces``); the random draws stay
in one stream in the order of a single pass, so the pieces change no value.
"""

from __future__ import annotations

import logging
import os
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np

from liqpanel.core.errors import ConfigError

logger = logging.getLogger("liqpanel.gibbs")

KEY = ["security", "month"]
DEFAULT_PRIOR: dict[str, float] = {
    "c_mean": 0.0,  # half-normal prior on c (convention of this project)
    "c_sd": 0.05,
    "loading_mean": 1.0,  # normal prior on the market loading (convention of this project)
    "loading_sd": 1.0,
    "alpha0": 1e-12,  # inverse-gamma prior on sigma_u^2, the usual vague choice (from memory)
    "beta0": 1e-12,
}
MIN_RETURNS = 3  # fewer returns leave the posterior of sigma_u^2 without a mean
LONG_RUN = 2_000_000  # security-months x sweeps above which progress is logged at INFO
PIECE_MONTHS = 2048  # the fewest security-months a thread takes when a batch's sweeps run in pieces (see _Pieces)


def draw_truncated_normal(mean: np.ndarray, sd: np.ndarray, uniform: np.ndarray) -> np.ndarray:
    """Draw from N(mean, sd^2) truncated to (0, inf) by inverting the distribution function.

    With a = -mean / sd, the standardised draw is z = -Phi^{-1}(U Phi(-a)), computed
    in logs (``log_ndtr``, ``ndtri_exp``) so that truncation points far in either
    tail stay accurate; the draw is mean + sd z. ``uniform`` must lie in (0, 1].
    All arguments broadcast.
    """
    from scipy.special import log_ndtr, ndtri_exp  # here: only the measures job that runs the sampler pays for scipy

    mean = np.asarray(mean, dtype=float)
    sd = np.asarray(sd, dtype=float)
    a = -mean / sd
    z = -ndtri_exp(np.log(uniform) + log_ndtr(-a))
    return np.maximum(sd * (z - a), 0.0)


def _prior(prior: dict[str, float] | None) -> dict[str, float]:
    merged = dict(DEFAULT_PRIOR)
    for key, value in (prior or {}).items():
        if key not in DEFAULT_PRIOR:
            raise ConfigError(f"measure 'gibbs_spread': option `prior` has no key {key!r}; its keys are {sorted(DEFAULT_PRIOR)}")
        merged[key] = float(value)
    for key in ("c_sd", "loading_sd", "alpha0", "beta0"):
        if not merged[key] > 0:
            raise ConfigError(f"measure 'gibbs_spread': `prior` {key} must be positive, got {merged[key]}")
    return merged


def _check_sweeps(sweeps: int, burn: int) -> None:
    if burn < 0 or sweeps <= burn:
        raise ConfigError(
            f"measure 'gibbs_spread': options `sweeps` and `burn` need 0 <= burn < sweeps, got burn={burn}, sweeps={sweeps}"
        )


@dataclass(frozen=True)
class RollDraws:
    """Posterior draws after burn-in, one column per security-month.

    ``half_spread`` and ``sigma_u`` have shape (kept sweeps, months);
    ``loading`` likewise or None without a market return; ``stuck_sweeps``
    counts, per month, the kept sweeps whose draw of c saw every valid
    q_t - q_{t-1} equal to zero (the failure the guard prevents).
    """

    half_spread: np.ndarray
    sigma_u: np.ndarray
    loading: np.ndarray | None
    stuck_sweeps: np.ndarray


def sample_roll_model(
    price_changes: np.ndarray,
    valid: np.ndarray,
    market_returns: np.ndarray | None = None,
    *,
    sweeps: int = 1000,
    burn: int = 200,
    rng: np.random.Generator,
    prior: dict[str, float] | None = None,
    guard: bool = True,
) -> RollDraws:
    """Run the Gibbs sampler on padded arrays of shape (days, security-months).

    ``price_changes[j, m]`` is dp of day j of month m (log price change from the
    previous close), ``valid`` marks the entries that exist. Month m has latent
    signs q_0..q_L: q_0 the state at the previous close, q_{j+1} at day j's
    close. Each sweep (Hasbrouck 2004; Hasbrouck 2009):

    1. (c, beta) | q, sigma_u^2: Bayesian regression of dp on dq (and r_m) with
       a normal prior; c is drawn from its truncated normal marginal (c > 0),
       beta from its normal distribution given c.
    2. sigma_u^2 | c, beta, q: inverse gamma with shape alpha0 + n/2 and scale
       beta0 + sum(u^2)/2.
    3. q | c, beta, sigma_u^2: q_k enters u_{k-1} and u_k only, so
       log P(q_k=+1)/P(q_k=-1) = (2c/sigma_u^2)[(y_{k-1} + c q_{k-1}) - (y_k - c q_{k+1})]
       with y = dp - beta r_m (terms of missing days drop out). Even and odd k
       are drawn as two blocks.

    Guard (``guard=True``): the prior of q excludes the configurations in which
    every valid dq_t is zero (it removes prior mass of about 2^-n). Otherwise a
    sweep that draws all signs equal makes c a draw from its prior, and the
    chain never leaves that state on short windows. Within a block the
    constrained conditional is sampled exactly: the first block position that
    deviates from the excluded configuration is drawn from its categorical
    distribution (Gumbel-max), the positions before it are set to the excluded
    values and the positions after it are drawn freely.
    """
    p = _prior(prior)
    _check_sweeps(sweeps, burn)
    price_changes, valid = np.asarray(price_changes, dtype=float), np.asarray(valid, dtype=bool)
    if price_changes.ndim != 2 or valid.shape != price_changes.shape:
        raise ValueError("sample_roll_model: price_changes and valid must be 2-D arrays of the same shape (days, months)")
    if market_returns is not None and np.shape(market_returns) != price_changes.shape:
        raise ValueError("sample_roll_model: market_returns must have the shape of price_changes")
    dp = np.where(valid, price_changes, 0.0).astype(float)
    V = valid.astype(float)
    L, M = dp.shape
    use_market = market_returns is not None
    rm = np.where(valid, market_returns, 0.0).astype(float) if use_market else None
    n = V.sum(axis=0)

    # Padded state: Qp[k + 1] = q_k for k = 0..L; Yp[j + 1] = valid y_j; Vp[j + 1] = valid_j.
    Qp = np.zeros((L + 3, M))
    Qp[1 : L + 2] = np.where(np.arange(L + 1) % 2 == 0, 1.0, -1.0)[:, None]
    Yp = np.zeros((L + 2, M))
    Yp[1 : L + 1] = dp
    Vp = np.zeros((L + 2, M))
    Vp[1 : L + 1] = V
    blocks = [_Block.build(parity, L, Vp, Yp) for parity in (0, 1)]

    mean_dp = dp.sum(axis=0) / np.maximum(n, 1.0)
    sigma2 = np.maximum(((dp - mean_dp) ** 2 * V).sum(axis=0) / np.maximum(n, 1.0), 1e-12)
    beta = None  # c and beta need no starting value: the first step of a sweep draws them
    prec_c0 = 1.0 / p["c_sd"] ** 2
    prec_b0 = 1.0 / p["loading_sd"] ** 2
    prior_c = p["c_mean"] * prec_c0
    prior_b = p["loading_mean"] * prec_b0
    shape = p["alpha0"] + n / 2.0
    if use_market:
        Srr = np.einsum("ij,ij->j", rm, rm)
        Srp = np.einsum("ij,ij->j", rm, dp)

    kept = sweeps - burn
    out_c = np.empty((kept, M))
    out_s = np.empty((kept, M))
    out_b = np.empty((kept, M)) if use_market else None
    stuck = np.zeros(M, dtype=np.int64)
    dq = np.empty((L, M))  # work arrays of every sweep, allocated once
    u = np.empty((L, M))
    uniform = np.empty((L + 1, M))
    c, beta, Sqq, ss = np.empty(M), np.empty(M) if use_market else None, np.empty(M), np.empty(M)
    long_run = M * sweeps >= LONG_RUN
    every = max(sweeps // 10, 1)
    started = time.perf_counter()

    def coefficients(cols: slice, uniform_c: np.ndarray, normal_b: np.ndarray | None) -> None:
        """Steps 1 and 2 for the months ``cols``: c (and beta), then the sum of squared residuals sigma_u^2 is drawn from."""
        dq_m, dp_m, s2 = dq[:, cols], dp[:, cols], sigma2[cols]
        # 1. (c, beta) | q, sigma_u^2
        np.subtract(Qp[2 : L + 2, cols], Qp[1 : L + 1, cols], out=dq_m)
        dq_m *= V[:, cols]
        Sqq[cols] = np.einsum("ij,ij->j", dq_m, dq_m)
        Sqp = np.einsum("ij,ij->j", dq_m, dp_m)
        if use_market:
            rm_m = rm[:, cols]
            Sqr = np.einsum("ij,ij->j", dq_m, rm_m)
            P11 = prec_c0 + Sqq[cols] / s2
            P12 = Sqr / s2
            P22 = prec_b0 + Srr[cols] / s2
            det = P11 * P22 - P12 * P12
            r1 = prior_c + Sqp / s2
            r2 = prior_b + Srp[cols] / s2
            C11, C12, C22 = P22 / det, -P12 / det, P11 / det
            m1 = C11 * r1 + C12 * r2
            m2 = C12 * r1 + C22 * r2
            c[cols] = draw_truncated_normal(m1, np.sqrt(C11), 1.0 - uniform_c[cols])
            beta[cols] = m2 + C12 / C11 * (c[cols] - m1) + np.sqrt(np.maximum(C22 - C12 * C12 / C11, 0.0)) * normal_b[cols]
        else:
            prec = prec_c0 + Sqq[cols] / s2
            c[cols] = draw_truncated_normal((prior_c + Sqp / s2) / prec, 1.0 / np.sqrt(prec), 1.0 - uniform_c[cols])
        # 2. sigma_u^2 | c, beta, q (dq, dp and rm are zero on missing days): the sum of squared residuals
        u_m = u[:, cols]
        np.multiply(dq_m, c[cols], out=u_m)
        np.subtract(dp_m, u_m, out=u_m)
        if use_market:
            u_m -= rm_m * beta[cols]
        ss[cols] = np.einsum("ij,ij->j", u_m, u_m)
        if use_market:  # the residuals of step 3 net of the market
            Yp[1 : L + 1, cols] = dp_m - rm_m * beta[cols]
            for block in blocks:
                block.refresh(Yp, cols)

    with _Pieces(M) as pieces, np.errstate(over="ignore"):
        for sweep in range(sweeps):
            # the sweep's random draws in the order of a single pass; the arithmetic between them by pieces of months
            uniform_c = rng.random(M)
            normal_b = rng.standard_normal(M) if use_market else None
            pieces.run(coefficients, uniform_c, normal_b)
            if sweep >= burn:
                stuck += Sqq == 0
            sigma2 = np.maximum((p["beta0"] + ss / 2.0) / rng.standard_gamma(shape), 1e-300)
            # 3. q | c, beta, sigma_u^2, in two blocks
            w = 2.0 * c / sigma2
            rng.random(out=uniform)  # the same stream as rng.random((L + 1, M)), without a new array each sweep
            for block in blocks:
                pieces.run(block.draw, Qp, c, w, uniform)
                if guard:
                    block.guard(Qp, w, rng)
            if sweep >= burn:
                out_c[sweep - burn] = c
                out_s[sweep - burn] = np.sqrt(sigma2)
                if use_market:
                    out_b[sweep - burn] = beta
            if (sweep + 1) % every == 0:
                level = logging.INFO if long_run else logging.DEBUG
                logger.log(level, "sweep %d of %d for %d security-months (%.1f s)", sweep + 1, sweeps, M,
                           time.perf_counter() - started)
    return RollDraws(half_spread=out_c, sigma_u=out_s, loading=out_b, stuck_sweeps=stuck)


class _Pieces:
    """The security-months cut into pieces, one per core the process may use (at most the run's engine
    threads), whose arithmetic runs in threads.

    Within a sweep every step between two random draws is elementwise or per
    month, so a piece's values are those of the whole batch, whatever the
    pieces (numpy leaves the interpreter lock in its loops); the draws stay in
    the sweep, in the order of one pass. A batch smaller than two pieces of
    ``PIECE_MONTHS`` runs as one piece, in the calling thread.
    """

    def __init__(self, months: int):
        cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1
        # no more than the run's engine threads (run.engine_threads, pinned for the process by liqpanel.core.runtime)
        allowed = os.environ.get("POLARS_MAX_THREADS", "")
        cores = min(cores, int(allowed)) if allowed.isdigit() and int(allowed) > 0 else cores
        count = max(1, min(cores, months // PIECE_MONTHS))
        bounds = np.linspace(0, months, count + 1).round().astype(int)
        self.pieces = [slice(int(a), int(b)) for a, b in zip(bounds[:-1], bounds[1:])]
        self.pool = ThreadPoolExecutor(count) if count > 1 else None

    def __enter__(self) -> "_Pieces":
        return self

    def __exit__(self, *exc) -> None:
        if self.pool is not None:
            self.pool.shutdown()

    def run(self, task, *args) -> None:
        """``task(piece, *args)`` on every piece, all done on return."""
        if self.pool is None:
            task(slice(None), *args)
            return

        def one(piece: slice) -> None:
            with np.errstate(over="ignore"):  # the sweep's setting, in the pool's thread
                task(piece, *args)

        for _ in self.pool.map(one, self.pieces):  # raises a task's error
            pass


class _Block:
    """The latent signs q_k of one parity (k even or k odd) and what their draw needs.

    Rows of the block are k = parity, parity + 2, ... <= L. In the padded arrays
    the left residual u_{k-1} sits at row k of Yp/Vp, the right residual u_k at
    row k + 1, the neighbours q_{k-1} and q_{k+1} at rows k and k + 2 of Qp, and
    q_k itself at row k + 1.
    """

    def __init__(self, parity, left, right, ahead, own, v_left, v_right, y_diff, connected, both):
        self.parity, self.left, self.right, self.ahead, self.own = parity, left, right, ahead, own
        self.v_left, self.v_right, self.y_diff = v_left, v_right, y_diff
        self.connected, self.both = connected, both
        self.both_valid = both > 0
        self.at_risk_possible = connected.any(axis=0)
        self.position = np.arange(connected.shape[0])[:, None]
        self.work = np.empty(connected.shape)
        self.odds = np.empty(connected.shape)
        self.plus = np.empty(connected.shape, dtype=bool)
        self.differ = np.empty(connected.shape, dtype=bool)

    @classmethod
    def build(cls, parity: int, L: int, Vp: np.ndarray, Yp: np.ndarray) -> "_Block":
        left = slice(parity, L + 1, 2)
        right = slice(parity + 1, L + 2, 2)
        ahead = slice(parity + 2, L + 3, 2)
        own = slice(parity + 1, L + 2, 2)
        v_left, v_right = Vp[left].copy(), Vp[right].copy()
        return cls(parity, left, right, ahead, own, v_left, v_right, Yp[left] - Yp[right],
                   (v_left + v_right) > 0, v_left * v_right)

    def refresh(self, Yp: np.ndarray, cols: slice) -> None:
        np.subtract(Yp[self.left, cols], Yp[self.right, cols], out=self.y_diff[:, cols])

    def draw(self, cols: slice, Qp, c, w, uniform) -> None:
        """The free draw of the block's signs of the months ``cols`` (before the guard)."""
        q_left, q_right = Qp[self.left, cols], Qp[self.ahead, cols]
        odds, work, c, w = self.odds[:, cols], self.work[:, cols], c[cols], w[cols]
        # log P(q_k=+1)/P(q_k=-1) = w [y_{k-1} - y_k + c (q_{k-1} + q_{k+1})] over the valid residuals;
        # ``odds`` keeps the bracket, the log odds are odds * w
        np.multiply(self.v_left[:, cols], q_left, out=odds)
        np.multiply(self.v_right[:, cols], q_right, out=work)
        odds += work
        odds *= c
        odds += self.y_diff[:, cols]
        # q_k = +1 with probability 1 / (1 + exp(-log odds)), written straight into the state
        np.multiply(odds, -w, out=work)  # -(odds * w), exactly
        np.exp(work, out=work)
        work += 1.0
        work *= uniform[self.parity :: 2, cols]
        plus = self.plus[:, cols]
        np.less(work, 1.0, out=plus)
        draw = Qp[self.own, cols]
        np.multiply(plus, 2.0, out=draw)
        draw -= 1.0

    def guard(self, Qp, w, rng) -> None:
        """Redraw the months whose free draw could make every valid dq zero (one draw for every month: in order)."""
        self._guard(Qp[self.own], Qp[self.left], Qp[self.ahead], w, rng)

    def _guard(self, draw, q_left, q_right, w, rng) -> None:
        """Redraw the months whose free draw could make every valid dq zero."""
        np.not_equal(q_left, q_right, out=self.differ)
        self.differ &= self.both_valid
        at_risk = self.at_risk_possible & ~self.differ.any(axis=0)  # every pair of valid neighbours agrees
        if not at_risk.any():
            return
        cols = np.flatnonzero(at_risk)
        conn = self.connected[:, cols]
        # The excluded value of each position: its valid neighbour's sign.
        excluded = np.where(self.v_left[:, cols] > 0, q_left[:, cols], q_right[:, cols])
        lo = excluded * (self.odds[:, cols] * w[cols])
        log_stay = np.where(conn, -np.logaddexp(0.0, -lo), 0.0)  # log P(q_k = excluded value)
        log_leave = -np.logaddexp(0.0, lo)  # log P(q_k = the other value)
        before = np.cumsum(log_stay, axis=0) - log_stay
        weights = np.where(conn, before + log_leave, -np.inf)
        first = np.argmax(weights + rng.gumbel(size=weights.shape), axis=0)
        block = draw[:, cols]
        block = np.where(conn & (self.position < first), excluded, block)
        block = np.where(self.position == first, -excluded, block)
        draw[:, cols] = block


__all__ = ["DEFAULT_PRIOR", "RollDraws", "draw_truncated_normal", "sample_roll_model"]
