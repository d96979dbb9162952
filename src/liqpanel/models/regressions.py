"""Panel regressions of next month's return on liquidity and characteristics.

A model is specified (:class:`ModelSpec`), fitted on the analysis panel
(:func:`fit_model`) and returned as a :class:`ModelResult`; several results are
set side by side by :func:`regression_table`. Estimation goes through
``linearmodels``:

* ``fama_macbeth`` -- Fama & MacBeth (1973), with Newey & West (1987)
  standard errors on the monthly slope series (``covariance="newey_west"``)
  or the plain standard error of the mean (``covariance="plain"``);
* ``pooled`` -- pooled OLS with standard errors clustered by security, by
  month or both (Petersen 2009; Cameron, Gelbach & Miller 2011),
  heteroskedasticity-robust (White 1980) or plain (``s^2 (X'X)^-1``);
* ``fixed_effects`` -- the within estimator with security and/or month effects;
* ``driscoll_kraay`` -- OLS (with effects if asked) and the Driscoll & Kraay
  (1998) covariance, robust to cross-sectional and serial correlation.

Standard errors follow the kernel convention of ``liqpanel.models.newey_west``.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
import polars as pl

from liqpanel.core.errors import ConfigError, InputError
from liqpanel.models.model_spec import INTERCEPT, KEY, MARKET, ModelSpec, LIBRARY_COVARIANCE
from liqpanel.models.newey_west import automatic_lags


@dataclass(frozen=True)
class ModelResult:
    """Estimates of one model.

    ``params``, ``std_errors``, ``tstats``, ``pvalues`` are keyed by regressor
    name (``intercept`` for the constant). ``nobs``: security-months used;
    ``n_months``: months used (for Fama-MacBeth, the cross-sections
    estimated); ``n_securities``: distinct securities used; ``r2``: for
    Fama-MacBeth the average cross-sectional R-squared, for fixed effects the
    within R-squared (after removing the effects), otherwise the OLS R-squared.
    ``nobs_dropped``: panel rows left out for a missing value in a variable
    the model uses; ``nobs_skipped``: complete rows in months whose
    Fama-MacBeth cross-section could not be estimated (fewer securities than
    parameters, or collinear regressors), not counted in ``nobs``. ``lags``: bandwidth used by a kernel covariance.
    """

    name: str
    estimator: str
    covariance: str
    params: dict[str, float]
    std_errors: dict[str, float]
    tstats: dict[str, float]
    pvalues: dict[str, float]
    nobs: int
    n_months: int
    n_securities: int
    r2: float
    nobs_dropped: int = 0
    nobs_skipped: int = 0
    lags: int | None = None
    dependent: str = "ret_next"
    cluster: tuple[str, ...] = field(default_factory=tuple)
    effects: tuple[str, ...] = field(default_factory=tuple)

    def summary(self) -> str:
        """Plain-text summary: one line per coefficient, then the sample."""
        cov = self.covariance
        if cov == "clustered":
            cov += " by " + " and ".join(self.cluster)
        if self.lags is not None and cov in ("newey_west", "bartlett"):
            cov += f", {self.lags} lags"
        lines = [
            f"Model {self.name}: {self.estimator}, dependent {self.dependent}",
            f"Standard errors: {cov}" + (f"; effects: {', '.join(self.effects)}" if self.effects else ""),
            f"{'variable':<24}{'coef':>12}{'std err':>12}{'t':>10}{'p':>10}",
        ]
        for name, value in self.params.items():
            lines.append(
                f"{name:<24}{value:>12.6f}{self.std_errors[name]:>12.6f}"
                f"{self.tstats[name]:>10.3f}{self.pvalues[name]:>10.4f}"
            )
        r2_label = "average R-squared" if self.estimator == "fama_macbeth" else "R-squared"
        lines.append(
            f"N = {self.nobs} ({self.nobs_dropped} dropped for missing values"
            + (f", {self.nobs_skipped} in months that could not be estimated" if self.nobs_skipped else "")
            + f"), months = {self.n_months}, "
            f"securities = {self.n_securities}, {r2_label} = {self.r2:.4f}"
        )
        return "\n".join(lines)


def _uses_market(spec: ModelSpec) -> bool:
    return MARKET in spec.effects or (spec.covariance == "clustered" and MARKET in spec.cluster)


def _model_frame(panel: pl.DataFrame | pl.LazyFrame, spec: ModelSpec) -> tuple[pl.DataFrame, int]:
    """Key (and the market code when used) and model variables, rows with a missing (null or NaN) value dropped."""
    lazy = panel.lazy() if isinstance(panel, pl.DataFrame) else panel
    schema = lazy.collect_schema()
    names = schema.names()
    if _uses_market(spec) and MARKET not in names:
        raise InputError(f"model '{spec.name}' uses market effects or clusters, which need the panel's "
                         f"'{MARKET}' column (a run with several markets, `markets:`)", column=MARKET)
    for column in (*KEY, *spec.variables):
        if column not in names:
            raise InputError(
                f"model '{spec.name}' needs a column '{column}' in the panel table, which has {sorted(names)}",
                column=column,
            )
    for column in spec.variables:
        if not schema[column].is_numeric():
            raise InputError(
                f"model '{spec.name}': panel column '{column}' must be numeric, found {schema[column]}",
                column=column,
            )
    cols = [*KEY, *([MARKET] if _uses_market(spec) else []), *spec.variables]
    frame = lazy.select(cols).with_columns(pl.col(list(spec.variables)).cast(pl.Float64)).collect()
    complete = frame.filter(
        pl.all_horizontal(pl.col(list(spec.variables)).is_not_null() & pl.col(list(spec.variables)).is_finite())
        & (pl.col(MARKET).is_not_null() if _uses_market(spec) else True)
    ).sort(list(KEY))
    return complete, frame.height - complete.height


def _has_intercept(spec: ModelSpec) -> bool:
    # Entity or time effects absorb the intercept; it is not estimated then (market dummies leave it).
    return spec.constant and not set(spec.effects) - {MARKET}


def _market_dummies(spec: ModelSpec) -> bool:
    """Market effects as dummy regressors (fama_macbeth, pooled); else as the library's other effects."""
    return MARKET in spec.effects and spec.estimator in ("fama_macbeth", "pooled")


def _to_pandas(frame: pl.DataFrame, spec: ModelSpec):
    data = frame.to_pandas().set_index(list(KEY))
    y = data[spec.dependent]
    x = data[list(spec.regressors)].copy()
    if _has_intercept(spec):
        x.insert(0, INTERCEPT, 1.0)
    if _market_dummies(spec):  # one per market but the first in name order: the intercept is the first's level
        for code in sorted(frame.get_column(MARKET).unique().to_list())[1:]:
            x[f"{MARKET}[{code}]"] = (data[MARKET] == code).astype(float)
    return y, x


def _as_dict(series) -> dict[str, float]:
    return {str(k): float(v) for k, v in series.items()}


def _check_lags(spec: ModelSpec, n_months: int) -> int:
    lags = automatic_lags(n_months) if spec.lags is None else int(spec.lags)
    if lags >= n_months:
        raise ConfigError(
            f"model '{spec.name}': 'lags' is {lags} but the sample has {n_months} months; "
            "the bandwidth must be below the number of months"
        )
    return lags


def fit_model(panel: pl.DataFrame, spec: ModelSpec) -> ModelResult:
    """Fit one model on the analysis panel.

    Data: ``panel`` is keyed by (``security``, ``month``); rows with a missing
    value in the dependent or a regressor are dropped (counted in
    ``nobs_dropped``). Units: coefficients are in units of the dependent per
    unit of the regressor (returns are decimal, spreads proportional).

    Estimators (all through ``linearmodels``):

    * Fama & MacBeth (1973): each month ``t`` run OLS
      ``y_it = x_it' b_t + e_it`` across securities; the estimate is
      ``b = (1/T) sum_t b_t`` and its covariance is that of a mean of the
      series ``b_t``: Newey & West (1987) with Bartlett weights
      ``1 - j/(L+1)`` and ``Var(b) = S / (T (T - 1))``
      (``covariance="newey_west"``), or ``L = 0`` (``"plain"``). Months whose
      cross-section is rank deficient are skipped by linearmodels (warning)
      and not counted in ``n_months``. ``r2`` is the average cross-sectional
      R-squared. Assumes the slope estimates are stationary with
      autocorrelation dying out within ``L`` months; robust to any
      cross-sectional correlation of the errors.
    * Pooled OLS: ``b = (X'X)^-1 X'y`` over all security-months. Clustered
      covariance (Petersen 2009; two-way as in Cameron, Gelbach & Miller
      2011: ``V_security + V_month - V_security∩month``), each one-way piece
      with the factor ``G/(G-1) * (N-1)/(N-k)``; ``robust`` is White (1980)
      with ``N/(N-k)``; ``plain`` is ``s^2 (X'X)^-1``.
    * Fixed effects: within transformation for security and/or month effects,
      then as pooled; absorbed effects are counted in the degrees of freedom
      unless a single effect is nested in the clusters (linearmodels
      ``auto_df``).
    * Driscoll & Kraay (1998): OLS (with effects if given) and
      ``V = (X'X)^-1 [sum_j w_j (G_j + G_j')] (X'X)^-1 * N/(N-k)`` with
      ``h_t = sum_i x_it e_it``, ``G_j = sum_t h_t h_{t-j}'``, Bartlett
      weights ``w_j = 1 - j/(L+1)`` (``w_0`` counted once). Robust to
      cross-sectional and serial correlation; needs many months. With
      effects, ``X``, ``y`` are the within-transformed data; with security
      effects the factor is ``N/(N-k-G)``, ``G`` the number of securities
      (the absorbed means count as estimated parameters), as linearmodels'
      ``PanelOLS`` applies with ``debiased=True``; ``tests/test_regressions.py``
      checks it against the formula on the Grunfeld panel. Month effects
      follow the library's own degrees-of-freedom count.

    ``lags=None`` uses the rule of thumb ``floor(4 (T/100)^(2/9))``
    (Newey & West 1994).
    """
    from linearmodels import FamaMacBeth, PanelOLS, PooledOLS

    frame, dropped = _model_frame(panel, spec)
    n_vars = len(spec.regressors) + int(_has_intercept(spec))
    if frame.height <= n_vars:
        raise InputError(
            f"model '{spec.name}': only {frame.height} panel rows have all of {list(spec.variables)} "
            f"({dropped} dropped for missing values); at least {n_vars + 1} are needed"
        )
    n_securities = frame.get_column("security").n_unique()
    months = frame.get_column("month").n_unique()
    y, x = _to_pandas(frame, spec)
    lags_used: int | None = None
    skipped = 0

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", category=FutureWarning)
        if spec.estimator == "fama_macbeth":
            eligible = frame.group_by("month").len().filter(pl.col("len") >= n_vars).height
            if eligible < 2:
                raise InputError(
                    f"model '{spec.name}': Fama-MacBeth needs at least 2 months with {n_vars} or more "
                    f"securities, found {eligible}"
                )
            model = FamaMacBeth(y, x)
            if spec.covariance == "newey_west":
                lags_used = _check_lags(spec, eligible)
                res = model.fit(cov_type="kernel", kernel="bartlett", bandwidth=float(lags_used), debiased=True)
            else:
                lags_used = 0
                res = model.fit(cov_type="unadjusted", debiased=True)
            estimated = res.all_params.index[np.isfinite(np.asarray(res.all_params, dtype=float)).all(axis=1)]
            n_months = len(estimated)
            estimated_months = pl.DataFrame({"month": pl.Series(estimated.to_numpy()).cast(pl.Date)})
            used = frame.join(estimated_months, on="month", how="semi").sort(list(KEY))
            skipped = frame.height - used.height
            frame = used
            n_securities = frame.get_column("security").n_unique()
            r2 = float(res.avg_rsquared)
        else:
            entity = "security" in spec.effects
            time = "month" in spec.effects
            codes = frame.to_pandas().set_index(list(KEY))[MARKET] if _uses_market(spec) else None
            if spec.effects and not _market_dummies(spec):
                other = codes.astype("category").cat.codes.to_frame(MARKET) if MARKET in spec.effects else None
                model = PanelOLS(y, x, entity_effects=entity, time_effects=time, other_effects=other)
            else:
                model = PooledOLS(y, x)
            fit_kwargs: dict = {"debiased": True}
            if spec.covariance == "clustered" and MARKET in spec.cluster:
                # the market code and any other dimension as the library's cluster codes (at most two)
                index = y.index
                columns = {
                    MARKET: codes.astype("category").cat.codes,
                    "security": index.get_level_values(0).astype("category").codes,
                    "month": index.get_level_values(1).astype("category").codes,
                }
                import pandas as pd

                clusters = pd.DataFrame({c: np.asarray(columns[c]) for c in spec.cluster}, index=index)
                fit_kwargs.update(cov_type="clustered", clusters=clusters, group_debias=True)
            elif spec.covariance == "clustered":
                fit_kwargs.update(
                    cov_type="clustered",
                    cluster_entity="security" in spec.cluster,
                    cluster_time="month" in spec.cluster,
                    group_debias=True,
                )
            elif spec.covariance == "bartlett":
                lags_used = _check_lags(spec, months)
                fit_kwargs.update(cov_type="kernel", kernel="bartlett", bandwidth=float(lags_used))
            else:
                fit_kwargs.update(cov_type=LIBRARY_COVARIANCE[spec.covariance])
            res = model.fit(**fit_kwargs)
            n_months = months
            r2 = float(res.rsquared)

    return ModelResult(
        name=spec.name,
        estimator=spec.estimator,
        covariance=spec.covariance,
        params=_as_dict(res.params),
        std_errors=_as_dict(res.std_errors),
        tstats=_as_dict(res.tstats),
        pvalues=_as_dict(res.pvalues),
        nobs=int(frame.height),
        n_months=int(n_months),
        n_securities=int(n_securities),
        r2=r2,
        nobs_dropped=int(dropped),
        nobs_skipped=int(skipped),
        lags=lags_used,
        dependent=spec.dependent,
        cluster=spec.cluster if spec.covariance == "clustered" else (),
        effects=spec.effects,
    )
