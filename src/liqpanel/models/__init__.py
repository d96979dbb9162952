"""Models stage: regressions, portfolio sorts, the liquidity factor, proxy validation.

Pure functions of the analysis panel (keyed by ``security``, ``month``; the
dependent ``ret_next`` is the return of month t+1), testable without Snakemake.
"""

from liqpanel.models.factor import factor_summary, liquidity_factor
from liqpanel.models.model_spec import ModelSpec
from liqpanel.models.newey_west import automatic_lags, newey_west_mean
from liqpanel.models.regression_table import regression_table
from liqpanel.models.regressions import ModelResult, fit_model
from liqpanel.models.sorts import DoubleSortResult, HighMinusLow, SortResult, double_sort, sort_portfolios
from liqpanel.models.validation import validate_proxies

__all__ = [
    "DoubleSortResult",
    "HighMinusLow",
    "ModelResult",
    "ModelSpec",
    "SortResult",
    "automatic_lags",
    "double_sort",
    "factor_summary",
    "fit_model",
    "liquidity_factor",
    "newey_west_mean",
    "regression_table",
    "sort_portfolios",
    "validate_proxies",
]
