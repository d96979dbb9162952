"""Many small least-squares fits at once, from sums of cross products.

A time-series regression per security (or per security and window) needs
only the sums ``n``, ``X'X``, ``X'y`` and ``y'y`` of its rows. Those sums are
polars aggregations over whole columns (a ``group_by`` for one fit per
security, a ``rolling_sum`` over each security's months for rolling windows),
and the normal equations of every fit are then solved together as one
stacked numpy array. No loop runs over securities or windows.

Formula (ordinary least squares, e.g. Greene, Econometric Analysis, ch. 3-4):
``b = (X'X)^{-1} X'y``; ``SSR = y'y - b'X'y``; ``s^2 = SSR / (n - k)``;
``se(b) = sqrt(diag(s^2 (X'X)^{-1}))``; ``R^2 = 1 - SSR / (y'y - n ybar^2)``;
``adj R^2 = 1 - (1 - R^2)(n - 1)/(n - k)``. The intercept is the first
regressor. A fit with fewer than ``min_obs`` rows, or with a design whose
smallest eigenvalue of the scaled ``X'X`` is below ``1e-10`` times its
largest (near collinear, a convention of this project), gives missing values.
"""

from __future__ import annotations

import numpy as np
import polars as pl

from liqpanel.core.stable import ordered_sum

RCOND = 1e-10


def _pairs(k: int) -> list[tuple[int, int]]:
    return [(i, j) for i in range(k) for j in range(i, k)]


def product_columns(y: str, xs: list[str], valid: pl.Expr | None = None) -> list[pl.Expr]:
    """Per-row cross products of ``[1, *xs]`` and ``y``, zero on rows that are not valid.

    Columns: ``_n`` (1 on a usable row), ``_xx_i_j`` (i <= j), ``_xy_i``,
    ``_yy``. A row is usable when ``y`` and every ``x`` are finite numbers
    (and ``valid`` holds, when given). Sum them over any grouping and pass
    the sums to :func:`solve_sums`.
    """
    cols = [pl.lit(1.0)] + [pl.col(x).cast(pl.Float64) for x in xs]
    target = pl.col(y).cast(pl.Float64)
    ok = pl.all_horizontal([c.is_not_null() & c.is_finite() for c in cols[1:] + [target]])
    if valid is not None:
        ok = ok & valid.fill_null(False)

    def masked(expr: pl.Expr) -> pl.Expr:
        return pl.when(ok).then(expr).otherwise(0.0)

    out = [masked(pl.lit(1.0)).alias("_n")]
    out += [masked(cols[i] * cols[j]).alias(f"_xx_{i}_{j}") for i, j in _pairs(len(cols))]
    out += [masked(cols[i] * target).alias(f"_xy_{i}") for i in range(len(cols))]
    out.append(masked(target * target).alias("_yy"))
    return out


def product_names(k: int) -> list[str]:
    """Names of the columns :func:`product_columns` makes for ``k`` regressors (intercept included)."""
    return ["_n", *[f"_xx_{i}_{j}" for i, j in _pairs(k)], *[f"_xy_{i}" for i in range(k)], "_yy"]


def solve_sums(sums: pl.DataFrame, k: int, min_obs: int) -> dict[str, np.ndarray]:
    """Solve every row's normal equations; ``k`` regressors including the intercept.

    ``sums`` holds the summed columns of :func:`product_columns` (one row per
    fit). Returns arrays: ``coef`` and ``se`` (rows x k), ``n``, ``r2``,
    ``adj_r2``, ``resid_var``; missing (NaN) where the fit is not possible.
    """
    m = sums.height
    n = sums.get_column("_n").to_numpy().astype(float)
    xx = np.zeros((m, k, k))
    for i, j in _pairs(k):  # k(k+1)/2 columns, not rows
        v = sums.get_column(f"_xx_{i}_{j}").to_numpy()
        xx[:, i, j] = v
        xx[:, j, i] = v
    xy = np.column_stack([sums.get_column(f"_xy_{i}").to_numpy() for i in range(k)])
    yy = sums.get_column("_yy").to_numpy().astype(float)

    usable = n >= max(min_obs, k + 1)
    # scale to unit diagonal before judging collinearity
    diag = np.sqrt(np.where(np.diagonal(xx, axis1=1, axis2=2) > 0, np.diagonal(xx, axis1=1, axis2=2), 1.0))
    scaled = xx / diag[:, :, None] / diag[:, None, :]
    eig = np.linalg.eigvalsh(np.where(usable[:, None, None], scaled, np.eye(k)))
    usable &= eig[:, 0] > RCOND * eig[:, -1]
    safe = np.where(usable[:, None, None], xx, np.eye(k))
    inv = np.linalg.inv(safe)
    coef = np.matmul(inv, np.where(usable[:, None], xy, 0.0)[:, :, None])[:, :, 0]
    ssr = np.maximum(yy - (coef * xy).sum(axis=1), 0.0)
    dof = np.where(usable, n - k, 1.0)
    resid_var = ssr / dof
    se = np.sqrt(np.maximum(np.diagonal(inv, axis1=1, axis2=2), 0.0) * resid_var[:, None])
    ybar = np.where(n > 0, xy[:, 0] / np.where(n > 0, n, 1.0), 0.0)
    sst = yy - n * ybar**2
    with np.errstate(divide="ignore", invalid="ignore"):
        r2 = np.where(sst > 0, 1.0 - ssr / sst, np.nan)
        adj = 1.0 - (1.0 - r2) * (n - 1) / dof
    nan = np.full(m, np.nan)
    return {
        "coef": np.where(usable[:, None], coef, np.nan),
        "se": np.where(usable[:, None], se, np.nan),
        "n": n,
        "r2": np.where(usable, r2, nan),
        "adj_r2": np.where(usable, adj, nan),
        "resid_var": np.where(usable, resid_var, nan),
    }


def grouped_ols(
    frame: pl.DataFrame, y: str, xs: list[str], by: str | list[str], min_obs: int, order: str = "month"
) -> pl.DataFrame:
    """One OLS of ``y`` on an intercept and ``xs`` per group of ``by``.

    The cross products are added in the order of ``order`` within each group
    (:mod:`liqpanel.core.stable`), so the fits do not depend on row order.

    Returns the groups (sorted) with ``n_obs``, ``coef_<name>``,
    ``se_<name>``, ``tstat_<name>`` for ``intercept`` and each ``x``,
    ``r2`` and ``adj_r2``. Rows with a missing or non-finite value are left
    out of their group's fit.
    """
    by = [by] if isinstance(by, str) else list(by)
    k = len(xs) + 1
    sums = (
        frame.lazy()
        .select(*by, order, *product_columns(y, xs))
        .group_by(by)
        .agg([ordered_sum(pl.col(c), order).alias(c) for c in product_names(k)])
        .sort(by)
        .collect()
    )
    return _frame_of(sums.select(by), solve_sums(sums, k, min_obs), ["intercept", *xs])


def _frame_of(keys: pl.DataFrame, fit: dict[str, np.ndarray], names: list[str]) -> pl.DataFrame:
    cols = {"n_obs": fit["n"].astype(np.int64)}
    for i, name in enumerate(names):
        cols[f"coef_{name}"] = fit["coef"][:, i]
        cols[f"se_{name}"] = fit["se"][:, i]
        with np.errstate(divide="ignore", invalid="ignore"):
            cols[f"tstat_{name}"] = fit["coef"][:, i] / fit["se"][:, i]
    cols["r2"] = fit["r2"]
    cols["adj_r2"] = fit["adj_r2"]
    return keys.with_columns(**{c: pl.Series(v) for c, v in cols.items()}).with_columns(
        pl.col(pl.Float64).fill_nan(None)
    )


def rolling_ols(
    frame: pl.DataFrame, y: str, xs: list[str], *, entity: str, time: str, window: int, min_obs: int
) -> pl.DataFrame:
    """OLS of ``y`` on an intercept and ``xs`` over each entity's trailing ``window`` periods.

    ``frame`` must hold every (entity, time) period in a run without gaps
    (missing values allowed), so that ``window`` rows are ``window``
    periods. Each row's fit uses that row and the ``window - 1`` rows before
    it of the same entity; rows with a missing value drop out of the fit.
    Output columns as :func:`grouped_ols`, one row per input row.
    """
    k = len(xs) + 1
    names = product_names(k)
    sums = (
        frame.lazy()
        .sort(entity, time)
        .select(entity, time, *product_columns(y, xs))
        .with_columns(pl.col(names).rolling_sum(window, min_samples=1).over(entity))
        .collect()
    )
    return _frame_of(sums.select(entity, time), solve_sums(sums, k, min_obs), ["intercept", *xs])
