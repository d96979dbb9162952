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

The likelihood and its derivatives are in ``liqpanel.measures.lot_likelihood``,
the starting values and the Newton iterations in ``liqpanel.measures.lot_solver``.
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass

import numpy as np
import polars as pl

from liqpanel.core.contracts import require_columns
from liqpanel.core.errors import ConfigError
from liqpanel.measures.lot_likelihood import LotData, _as_rows, evaluate, log_likelihood, regions
from liqpanel.measures.lot_solver import _iterate, _starting_values, starting_values
from liqpanel.measures.neighbours import FIRST_OF_MONTH, in_security_date_order


KEY = ["security", "month"]
FORMS = ("mixed", "ysplit")
MIN_RETURNS = 5  # fewest returns for four parameters and a variance (convention of this project)
CHUNK_MONTHS = 16384  # months fitted together: their working arrays stay in the processor's cache
FIRST_TURNS = 8  # iterations of a piece of months; the months still going then continue together
RESULTS = ("alpha_1", "alpha_2", "beta", "sigma", "log_likelihood", "iterations", "converged")


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


__all__ = ["FORMS", "LotData", "MonthRows", "evaluate", "fit_lot", "fit_rows", "log_likelihood", "lot_cost", "lot_mixed",
           "lot_ysplit", "regions", "starting_values"]
