"""Several fitted models side by side: coefficients, standard errors or t-statistics, stars and fit statistics."""

from __future__ import annotations

import math

import polars as pl

from liqpanel.models.model_spec import INTERCEPT
from liqpanel.models.regressions import ModelResult


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
