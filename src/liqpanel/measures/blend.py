"""A fixed-weight combination of spread estimators, with the weights the calibrated study proposes.

The study (``liqpanel.study.fit_blend``) chooses non-negative weights that sum
to one and minimise the RMSE against the simulated true spread; a later run
selects the blend under ``measures:`` with those weights:

    spread_blend:
      weights: {edge_spread: 0.6, ar_spread_monthly: 0.4}

No published horse race proposes such a blend: its weights are a
measurement on data simulated under the Roll model with the market's
calibrated conditions, and hold under that model's assumptions.
"""

from __future__ import annotations

from typing import Any

import polars as pl

from liqpanel.core.errors import ConfigError
from liqpanel.measures.registry import REGISTRY, Measure, register

KEY = ["security", "month"]
NAME = "spread_blend"


def check_weights(weights: dict[str, float] | None) -> dict[str, float]:
    """The weights as floats summing to one; refused unless they name spread measures, are non-negative and sum to one within 0.001."""
    if not weights:
        raise ConfigError(f"measure '{NAME}': option `weights` is empty; copy the weights of the study's "
                          "study_blend table, e.g. {edge_spread: 0.6, ar_spread_monthly: 0.4}")
    out = {}
    for name, weight in weights.items():
        measure = REGISTRY.get(name)
        if measure is None or measure.family != "spread" or name == NAME:
            raise ConfigError(f"measure '{NAME}': `weights` names '{name}', which is not a spread measure of the library")
        if not float(weight) >= 0:
            raise ConfigError(f"measure '{NAME}': weight of '{name}' is {weight}; weights must be non-negative")
        out[name] = float(weight)
    total = sum(out.values())
    if abs(total - 1.0) > 1e-3:  # weights copied with three decimals or more pass, and are rescaled to sum to one
        raise ConfigError(f"measure '{NAME}': weights sum to {total}; they must sum to one")
    return {name: weight / total for name, weight in out.items()}


def spread_blend(daily: pl.LazyFrame, *, weights: dict[str, float] | None = None,
                 options: dict[str, dict[str, Any] | None] | None = None) -> pl.LazyFrame:
    """Blend = sum_k w_k x S_k, the weighted sum of the spread estimators S_k of the month (their first outputs).

    ``weights``: estimator name -> weight (non-negative, summing to one; the
    study's ``study_blend`` table). ``options``: the components' options
    (default: the library's defaults; the study fits the weights with the
    options of the run's ``measures:`` section, so give the same ones).
    Missing when any component with a positive weight is missing (reason
    ``missing_<component>``); ``n_obs`` is the smallest of the components'.
    Units: proportional full spread (0.01 = 1%). Source: this project's
    calibrated study (``liqpanel.study``); no published source.
    """
    from liqpanel.measures import compute_monthly

    weights = check_weights(weights)
    used = {name: (options or {}).get(name) for name, w in weights.items() if w > 0}
    monthly = compute_monthly(daily, used)
    value = pl.sum_horizontal([pl.col(REGISTRY[n].outputs[0]) * weights[n] for n in used])
    missing = [pl.col(REGISTRY[n].outputs[0]).is_null() for n in used]
    reason = pl.lit(None, dtype=pl.String)
    for name, is_missing in reversed(list(zip(used, missing))):
        reason = pl.when(is_missing).then(pl.lit(f"missing_{name}")).otherwise(reason)
    return monthly.lazy().select(
        *KEY,
        pl.when(pl.any_horizontal(missing)).then(None).otherwise(value).alias(NAME),
        pl.min_horizontal([pl.col(f"{n}_n") for n in used]).cast(pl.Int64).alias("n_obs"),
        reason.alias("reason"),
    )


register(
    Measure(
        name=NAME,
        function=spread_blend,
        outputs=(NAME,),
        columns=(),
        source="calibrated study of this project (weights fitted on simulated data; no published source)",
        family="spread",
        min_days=1,  # the components apply their own minimum
        options={"weights": {}, "options": {}},
        description="non-negative weights summing to one over spread estimators, from the study's study_blend table",
    )
)

__all__ = ["NAME", "check_weights", "spread_blend"]
