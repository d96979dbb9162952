"""How numbers are printed in the LaTeX and Markdown tables (the CSV keeps full precision).

One policy for every table, by kind of number. The kind of a cell comes from
its column's name, or, in a column of mixed statistics (``value``), from its
row's label (``months``, ``t-statistic (Newey-West)``, ``R-squared``):

* counts (integer columns; ``n``, ``n_months``, ``months``, ``securities``,
  ``count``...): whole numbers, ``35`` never ``35.0000``; an average count
  (``mean_n_securities``) one decimal;
* t-statistics: two decimals;
* shares, proportions, correlations, R-squared, p-values, Sharpe ratios:
  three decimals;
* every other number (estimates, returns, spreads, standard errors): the
  same number of decimals down a column (or along a row, for tables whose
  rows are different variables, ``by_row``), chosen so that the group's
  typical size (median absolute value) shows ``digits`` significant digits:
  0.00896 and 0.0261 print as ``0.00896`` and ``0.02610``, 1371.98 as
  ``1372``; a small variable never prints as ``0.000``;
* months (dates on the first of a month) as ``YYYY-MM``.

Column headings and the text of row labels are printed through ``labels``
(``report.labels`` in the config), then through a few built-in headings for
our statistic columns (``std_error`` -> ``standard error``).
"""

from __future__ import annotations

import math
import re
from datetime import date, datetime
from typing import Any

import polars as pl

COUNTS = {
    "n", "count", "rows", "months", "securities", "nobs", "observations", "draws", "cells", "days", "obs",
}
HEADINGS = {
    "mean_ret": "mean return", "std_error": "standard error", "tstat": "t-statistic", "pvalue": "p-value",
    "n_months": "months", "mean_n_securities": "securities (mean)", "missing_share": "missing share",
    "sd": "standard deviation", "p25": "25th percentile", "p75": "75th percentile", "mean_estimate": "mean estimate",
    "mean_truth": "mean truth", "mean_bias": "mean bias", "rmse": "RMSE", "coef": "coefficient", "r2": "R-squared",
    "mean_cs_pearson": "cross-sectional Pearson (mean)", "mean_cs_spearman": "cross-sectional Spearman (mean)",
    "n_months_cs": "months (cross-section)", "ts_corr_market": "time-series correlation",
    "n_security_months": "security-months",
}


def kind(name: str) -> str:
    """``count``, ``average`` (an average count), ``tstat``, ``ratio`` or ``value``, from a column or row name."""
    low = name.strip().lower().replace("-", "_").replace(" ", "_")
    if low in COUNTS or (low.startswith("n_") and not low.startswith("n_share")):
        return "count"
    if low.startswith(("mean_n_", "avg_n_", "average_n_")):
        return "average"
    if "tstat" in low or "t_stat" in low:
        return "tstat"
    if any(word in low for word in ("share", "corr", "r_squared", "pvalue", "p_value", "sharpe")) or low in (
        "r2", "missing"
    ) or low.startswith("missing_"):
        return "ratio"
    return "value"


def decimals_for(values: list[float], digits: int) -> int:
    """Decimals that show ``digits`` significant digits of the group's median absolute value."""
    sizes = sorted(abs(v) for v in values if v is not None and math.isfinite(v) and v != 0)
    if not sizes:
        return max(digits - 1, 0)
    typical = sizes[len(sizes) // 2]
    return min(max(digits - 1 - math.floor(math.log10(typical)), 0), 10)


def _fixed(value: float, places: int) -> str:
    text = f"{value:.{places}f}"
    return text[1:] if text.startswith("-") and float(text) == 0 else text  # no "-0.000"


def _month_like(series: pl.Series) -> bool:
    return series.dtype in (pl.Date, pl.Datetime) and series.drop_nulls().dt.day().eq(1).all()


_WORD = re.compile(r"[A-Za-z0-9_]+")


def relabel(text: str, labels: dict | None) -> str:
    """``text`` with every whole word that ``labels`` names replaced by its label.

    ``"high-low roll_spread (avg over log_size groups)"`` becomes
    ``"high-low Roll spread (avg over log market value groups)"``.
    """
    if not labels:
        return text
    return _WORD.sub(lambda m: labels.get(m.group(0), m.group(0)), text)


def _text(value: Any, labels: dict) -> str:
    if value is None:
        return ""
    if isinstance(value, (datetime, date)):
        return value.strftime("%Y-%m-%d")
    return relabel(str(value), labels)


def heading(name: str, labels: dict | None = None) -> str:
    """A column's heading in print: its label, a built-in heading, or the name."""
    labels = labels or {}
    if name in labels:
        return labels[name]
    if name in HEADINGS:
        return HEADINGS[name]
    if name.startswith("missing_") and name != "missing_share":
        return f"missing: {labels.get(name[len('missing_'):], name[len('missing_'):])}"
    return name


def format_frame(df: pl.DataFrame, *, digits: int = 3, labels: dict | None = None, by_row: bool = False) -> tuple[
        list[str], list[list[str]]]:
    """Headings and cells of ``df`` as printed, by the policy above."""
    labels = labels or {}
    row_labels = df.get_column(df.columns[0]).cast(pl.String).to_list() if df.width and df.schema[
        df.columns[0]] == pl.String else [None] * df.height
    kinds = []  # per column: fixed kind, or None (decided per cell)
    for name, dtype in df.schema.items():
        if dtype.is_integer():
            kinds.append("count")
        elif dtype.is_float():
            kinds.append(kind(name))
        else:
            kinds.append(None)

    def cell_kind(i: int, j: int) -> str:
        k = kinds[j]
        if k == "value" and row_labels[i]:
            own = kind(row_labels[i])
            return own if own != "value" else k
        return k

    columns = [df.get_column(c).to_list() for c in df.columns]
    value_cells = [(i, j) for j, k in enumerate(kinds) if k for i in range(df.height) if cell_kind(i, j) == "value"]
    groups: dict[int, list[float]] = {}
    for i, j in value_cells:
        groups.setdefault(i if by_row else j, []).append(columns[j][i])
    places = {g: decimals_for(v, digits) for g, v in groups.items()}

    out = []
    for i in range(df.height):
        row = []
        for j, name in enumerate(df.columns):
            value = columns[j][i]
            if kinds[j] is None:
                if isinstance(value, (date, datetime)) and _month_like(df.get_column(name)):
                    row.append(value.strftime("%Y-%m"))
                else:
                    row.append(_text(value, labels) if j == 0 or df.schema[name] == pl.String else _text(value, {}))
                continue
            if value is None or (isinstance(value, float) and math.isnan(value)):
                row.append("")
                continue
            if isinstance(value, float) and math.isinf(value):
                row.append("inf" if value > 0 else "-inf")
                continue
            k = cell_kind(i, j)
            if k == "count":
                row.append(str(int(round(value))) if float(value).is_integer() else _fixed(value, 1))
            elif k == "average":
                row.append(_fixed(value, 1))
            elif k == "tstat":
                row.append(_fixed(value, 2))
            elif k == "ratio":
                row.append(_fixed(value, 3))
            else:
                row.append(_fixed(value, places[i if by_row else j]))
        out.append(row)
    return [heading(c, labels) for c in df.columns], out
