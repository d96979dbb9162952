"""What a regression is: its estimator, variables, effects and covariance (``ModelSpec``), checked when it is made."""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np

from liqpanel.core.errors import ConfigError


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
MARKET = "market"  # the panel's market code (several markets, liqpanel.markets.several)
# Our words of the trade -> the option words of the regression library; the
# library's own words are refused with the word to use instead.
LIBRARY_COVARIANCE = {"clustered": "clustered", "robust": "robust", "plain": "unadjusted", "bartlett": "kernel"}
_OLD_WORDS = {
    "covariance": {"unadjusted": "plain", "kernel": "bartlett", "homoskedastic": "plain"},
    "effects": {"entity": "security", "time": "month"},
}
INTERCEPT = "intercept"
KEY = ("security", "month")


def _refuse_library_words(where: str, key: str, values: tuple[str, ...]) -> None:
    """A clear error for the regression library's option words, naming ours."""
    for value in values:
        ours = _OLD_WORDS[key].get(value) if isinstance(value, str) else None
        if ours is not None:
            raise ConfigError(f"{where}: '{key}' has {value!r}; the word here is {ours!r}")


def _check_listed(where: str, key: str, values: tuple[str, ...], allowed: tuple[str, ...], one: str) -> None:
    """Each of ``values`` (the setting ``key``) is one of ``allowed``, and none is listed twice."""
    bad = [v for v in values if v not in allowed]
    if bad:
        raise ConfigError(f"{where}: '{key}' has {bad}; expected any of {list(allowed)}")
    if len(set(values)) != len(values):
        raise ConfigError(f"{where}: '{key}' repeats {one}: {list(values)}")


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
        _check_listed(where, "cluster", self.cluster, CLUSTER_DIMENSIONS, "a dimension")
        if self.covariance == "clustered" and not self.cluster:
            raise ConfigError(f"{where}: covariance 'clustered' needs 'cluster' (security and/or month)")
        _check_listed(where, "effects", self.effects, EFFECTS, "an effect")
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
        :class:`~liqpanel.core.errors.ConfigError` naming the model and the key.
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
