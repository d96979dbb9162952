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

Kernel convention used everywhere in this package (Fama-MacBeth, Driscoll-Kraay,
sort and factor t-statistics): Bartlett weights ``1 - j / (L + 1)`` for lags
``j = 0..L`` (Newey & West 1987) and the small-sample factor ``T / (T - k)``
(``k`` estimated parameters; ``k = 1`` for a mean). When ``lags`` is ``None``
the bandwidth is the rule of thumb ``floor(4 * (T / 100) ** (2 / 9))`` of
Newey & West (1994), ``T`` the number of months.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field, fields

import numpy as np
import polars as pl

from liqpanel.errors import ConfigError, InputError

ESTIMATORS = ("fama_macbeth", "pooled", "fixed_effects", "driscoll_kraay")
COVARIANCES = {
    "fama_macbeth": ("newey_west", "plain"),
    "pooled": ("clustered", "robust", "plain"),
    "fixed_effects": ("clustered", "robust", "plain"),
    "driscoll_kraay": ("bartlett",),
}
DEFAULT_COVARIANCE = {
    "fama_macbeth": "newey_west",
    "pooled": "clustered",
    "fixed_effects": "clustered",
    "driscoll_kraay": "bartlett",
}
CLUSTER_DIMENSIONS = ("security", "month", "market")
EFFECTS = ("security", "month", "market")
MARKET = "market"  # the panel's market code (several markets, liqpanel.marketset)
# Our words of the trade -> the option words of the regression library; the
# library's own words are refused with the word to use instead.
_LIBRARY_COVARIANCE = {"clustered": "clustered", "robust": "robust", "plain": "unadjusted", "bartlett": "kernel"}
_OLD_WORDS = {
    "covariance": {"unadjusted": "plain", "kernel": "bartlett", "homoskedastic": "plain"},
    "effects": {"entity": "security", "time": "month"},
}
INTERCEPT = "intercept"
KEY = ("security", "month")


def automatic_lags(n_periods: int) -> int:
    """Newey & West (1994) rule-of-thumb bandwidth ``floor(4 * (T / 100) ** (2 / 9))``.

    ``T`` is the number of monthly observations. The result is capped at
    ``T - 1`` so that it is always usable.
    """
    if n_periods < 2:
        return 0
    return int(min(math.floor(4 * (n_periods / 100) ** (2 / 9)), n_periods - 1))


def newey_west_mean(values, lags: int | None = 6) -> dict[str, float]:
    """Mean of a time series with its Newey & West (1987) standard error.

    Formula: for ``x_1..x_T`` with mean ``m`` and deviations ``e_t = x_t - m``,
    ``S = sum_t e_t^2 + 2 * sum_{j=1..L} (1 - j / (L + 1)) * sum_{t>j} e_t e_{t-j}``
    and ``Var(m) = S / (T * (T - 1))``; ``t = m / sqrt(Var(m))``. This is the
    HAC covariance of OLS on a constant with Bartlett weights and the
    small-sample factor ``T / (T - 1)`` (with ``L = 0`` it is the plain
    ``sd / sqrt(T)``). Assumes a covariance-stationary series whose
    autocorrelation dies out within about ``L`` periods. Units: those of the
    series. Missing values (null/NaN) are removed first and the remaining
    observations are treated as consecutive. ``lags=None`` uses
    :func:`automatic_lags`; lags at or above ``T`` are capped at ``T - 1``.

    Returns a dict with ``mean``, ``std_error``, ``tstat``, ``n`` and ``lags``.
    """
    x = np.asarray(values, dtype=float).ravel()
    x = x[np.isfinite(x)]
    n = x.size
    if n == 0:
        return {"mean": float("nan"), "std_error": float("nan"), "tstat": float("nan"), "n": 0, "lags": 0}
    mean = float(x.mean())
    if n < 2:
        return {"mean": mean, "std_error": float("nan"), "tstat": float("nan"), "n": n, "lags": 0}
    lag = automatic_lags(n) if lags is None else int(min(lags, n - 1))
    e = x - mean
    s = float(e @ e)
    for j in range(1, lag + 1):
        s += 2.0 * (1.0 - j / (lag + 1)) * float(e[j:] @ e[:-j])
    var = s / (n * (n - 1))
    se = math.sqrt(var) if var > 0 else float("nan")
    tstat = mean / se if se == se and se > 0 else float("nan")
    return {"mean": mean, "std_error": se, "tstat": tstat, "n": n, "lags": lag}


def _refuse_library_words(where: str, key: str, values: tuple[str, ...]) -> None:
    """A clear error for the regression library's option words, naming ours."""
    for value in values:
        ours = _OLD_WORDS[key].get(value) if isinstance(value, str) else None
        if ours is not None:
            raise ConfigError(f"{where}: '{key}' has {value!r}; the word here is {ours!r}")


@dataclass(frozen=True)
class ModelSpec:
    """One regression of the models stage.

    ``estimator``: ``fama_macbeth`` | ``pooled`` | ``fixed_effects`` |
    ``driscoll_kraay``. ``covariance`` by estimator: fama_macbeth ``newey_west``
    or ``plain``; pooled and fixed_effects ``clustered``, ``robust`` or
    ``plain``; driscoll_kraay ``bartlett`` (the Driscoll-Kraay covariance
    with Bartlett weights). Left at its default (``newey_west``) for an
    estimator other than fama_macbeth, it is read as that estimator's usual
    choice (``clustered``; ``bartlett`` for driscoll_kraay). ``lags``:
    Newey-West / Driscoll-Kraay bandwidth in months (``None``: Newey & West
    1994 rule of thumb, see :func:`automatic_lags`). ``cluster``: any two of
    ``security``, ``month``, ``market`` (the panel's market code, a run with
    several markets). ``effects``: any of ``security``, ``month``, ``market``
    (fixed effects per security, per month and per market; fixed_effects
    needs at least one; driscoll_kraay may use them too; fama_macbeth and
    pooled take ``market`` alone, as one dummy per market but the first).
    ``constant``: add an intercept (ignored when security or month effects
    are given: they absorb it, and no intercept is reported). These are our words; they are translated to the regression
    library's own inside :func:`fit_model`, and the library's words
    (``entity``, ``time``, ``unadjusted``, ``kernel``) are refused with the
    word to use instead.
    """

    name: str
    dependent: str = "ret_next"
    regressors: tuple[str, ...] = ()
    estimator: str = "fama_macbeth"
    covariance: str = "newey_west"
    lags: int | None = 6
    cluster: tuple[str, ...] = ("security",)
    effects: tuple[str, ...] = ()
    constant: bool = True

    def __post_init__(self) -> None:
        where = f"model '{self.name}'"
        if not isinstance(self.name, str) or not self.name:
            raise ConfigError(f"model name must be a non-empty string, got {self.name!r}")
        if not isinstance(self.dependent, str) or not self.dependent:
            raise ConfigError(f"{where}: 'dependent' must be a column name, got {self.dependent!r}")
        for attr in ("regressors", "cluster", "effects"):
            value = getattr(self, attr)
            if isinstance(value, str):
                value = (value,)
            if not isinstance(value, (tuple, list)) or not all(isinstance(v, str) for v in value):
                raise ConfigError(f"{where}: '{attr}' must be a list of names, got {value!r}")
            object.__setattr__(self, attr, tuple(value))
        if self.estimator not in ESTIMATORS:
            raise ConfigError(f"{where}: 'estimator' is {self.estimator!r}; expected one of {list(ESTIMATORS)}")
        _refuse_library_words(where, "covariance", (self.covariance,))
        _refuse_library_words(where, "effects", self.effects)
        if self.covariance == "newey_west" and self.estimator != "fama_macbeth":
            object.__setattr__(self, "covariance", DEFAULT_COVARIANCE[self.estimator])
        allowed = COVARIANCES[self.estimator]
        if self.covariance not in allowed:
            raise ConfigError(
                f"{where}: 'covariance' is {self.covariance!r}; the {self.estimator} estimator "
                f"accepts {list(allowed)}"
            )
        if not self.regressors:
            raise ConfigError(f"{where}: 'regressors' is empty; list at least one panel column")
        if len(set(self.regressors)) != len(self.regressors):
            raise ConfigError(f"{where}: 'regressors' repeats a column: {list(self.regressors)}")
        if self.dependent in self.regressors:
            raise ConfigError(f"{where}: the dependent '{self.dependent}' is also listed in 'regressors'")
        if INTERCEPT in self.regressors:
            raise ConfigError(f"{where}: '{INTERCEPT}' is reserved; use 'constant: true' instead")
        if self.lags is not None and (
            isinstance(self.lags, bool) or not isinstance(self.lags, (int, np.integer)) or self.lags < 0
        ):
            raise ConfigError(f"{where}: 'lags' is {self.lags!r}; expected a non-negative integer or null")
        bad = [c for c in self.cluster if c not in CLUSTER_DIMENSIONS]
        if bad:
            raise ConfigError(f"{where}: 'cluster' has {bad}; expected any of {list(CLUSTER_DIMENSIONS)}")
        if len(set(self.cluster)) != len(self.cluster):
            raise ConfigError(f"{where}: 'cluster' repeats a dimension: {list(self.cluster)}")
        if self.covariance == "clustered" and not self.cluster:
            raise ConfigError(f"{where}: covariance 'clustered' needs 'cluster' (security and/or month)")
        bad = [e for e in self.effects if e not in EFFECTS]
        if bad:
            raise ConfigError(f"{where}: 'effects' has {bad}; expected any of {list(EFFECTS)}")
        if len(set(self.effects)) != len(self.effects):
            raise ConfigError(f"{where}: 'effects' repeats an effect: {list(self.effects)}")
        if self.estimator == "fixed_effects" and not self.effects:
            raise ConfigError(f"{where}: the fixed_effects estimator needs 'effects' (security and/or month)")
        if len(self.cluster) > 2:
            raise ConfigError(f"{where}: 'cluster' has {list(self.cluster)}; at most two dimensions")
        if MARKET in self.effects and "security" in self.effects:
            raise ConfigError(f"{where}: security effects absorb market effects (each security lists on one "
                              "market); keep one of them")
        if set(self.effects) - {MARKET} and self.estimator in ("fama_macbeth", "pooled"):
            raise ConfigError(
                f"{where}: 'effects' is {list(self.effects)} but the {self.estimator} estimator takes none; "
                "use estimator fixed_effects"
            )
        if not isinstance(self.constant, bool):
            raise ConfigError(f"{where}: 'constant' is {self.constant!r}; expected true or false")

    @classmethod
    def from_config(cls, d: dict) -> "ModelSpec":
        """Build a spec from one entry of the config's model list.

        Unknown keys, a missing name and values of the wrong kind raise
        :class:`~liqpanel.errors.ConfigError` naming the model and the key.
        A covariance left out is the estimator's usual choice.
        """
        if not isinstance(d, dict):
            raise ConfigError(f"a model entry must be a mapping, got {type(d).__name__}")
        name = d.get("name")
        if not isinstance(name, str) or not name:
            raise ConfigError(f"a model entry has no 'name' (a non-empty string): {d!r}")
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(d) - known)
        if unknown:
            raise ConfigError(f"model '{name}': unknown key(s) {unknown}; expected keys {sorted(known)}")
        kwargs = dict(d)
        estimator = kwargs.get("estimator", "fama_macbeth")
        if "covariance" not in kwargs and isinstance(estimator, str):
            kwargs["covariance"] = DEFAULT_COVARIANCE.get(estimator, "newey_west")
        elif kwargs.get("covariance") == "newey_west" and estimator != "fama_macbeth":
            raise ConfigError(
                f"model '{name}': 'covariance' is 'newey_west' but the {estimator} estimator accepts "
                f"{list(COVARIANCES.get(estimator, ()))}"
            )
        for key in ("regressors", "cluster", "effects"):
            if key in kwargs:
                value = kwargs[key]
                if isinstance(value, str):
                    value = [value]
                if not isinstance(value, (list, tuple)):
                    raise ConfigError(f"model '{name}': '{key}' must be a list, got {value!r}")
                kwargs[key] = tuple(value)
        return cls(**kwargs)

    @property
    def variables(self) -> tuple[str, ...]:
        """Panel columns the model uses (dependent first)."""
        return (self.dependent, *self.regressors)


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
                fit_kwargs.update(cov_type=_LIBRARY_COVARIANCE[spec.covariance])
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


def _fixed(value: float, digits: int) -> str:
    if value is None or not math.isfinite(value):
        return ""
    text = f"{value:.{digits}f}"
    if float(text) == 0.0:
        text = text.lstrip("-")
    return text


def _stars(p: float) -> str:
    if p is None or not math.isfinite(p):
        return ""
    if p < 0.01:
        return "***"
    if p < 0.05:
        return "**"
    if p < 0.10:
        return "*"
    return ""


def regression_table(results: list[ModelResult], stars: bool = False, digits: int = 3) -> pl.DataFrame:
    """Models side by side, as journals print them.

    One row per regressor with the coefficient, the next row (``variable``
    empty) its t-statistic in parentheses; regressors in order of first
    appearance, the intercept last. With ``stars``, coefficients are marked
    ``*``, ``**``, ``***`` for two-sided p-values below 10%, 5%, 1%. Then rows
    ``N`` (security-months), ``Months`` and the R-squared, labelled
    ``Average R-squared`` when every model is Fama-MacBeth and
    ``R-squared (Fama-MacBeth: average)`` when they are mixed. All cells are
    strings with ``digits`` decimals (t-statistics too; R-squared with
    ``digits`` decimals); a regressor absent from a model is an empty cell.
    Columns: ``variable`` and one per model name, in the given order.
    """
    if not results:
        raise ValueError("regression_table needs at least one model result")
    names = [r.name for r in results]
    if len(set(names)) != len(names):
        raise ValueError(f"model names must be unique to head the columns, got {names}")
    if "variable" in names:
        raise ValueError("a model cannot be called 'variable' (the table's first column)")
    if not isinstance(digits, int) or digits < 0:
        raise ValueError(f"digits must be a non-negative integer, got {digits!r}")

    order: list[str] = []
    for r in results:
        for v in r.params:
            if v != INTERCEPT and v not in order:
                order.append(v)
    if any(INTERCEPT in r.params for r in results):
        order.append(INTERCEPT)

    rows: dict[str, list[str]] = {"variable": []}
    for n in names:
        rows[n] = []
    for v in order:
        rows["variable"].extend([v, ""])
        for r in results:
            if v in r.params:
                coef = _fixed(r.params[v], digits)
                if stars and coef:
                    coef += _stars(r.pvalues.get(v, float("nan")))
                t = _fixed(r.tstats.get(v, float("nan")), digits)
                rows[r.name].extend([coef, f"({t})" if t else ""])
            else:
                rows[r.name].extend(["", ""])
    fm = [r.estimator == "fama_macbeth" for r in results]
    if all(fm):
        r2_label = "Average R-squared"
    elif any(fm):
        r2_label = "R-squared (Fama-MacBeth: average)"
    else:
        r2_label = "R-squared"
    rows["variable"].extend(["N", "Months", r2_label])
    for r in results:
        rows[r.name].extend([str(r.nobs), str(r.n_months), _fixed(r.r2, digits)])
    return pl.DataFrame(rows, schema={k: pl.String for k in rows})
