"""Portfolio sorts on lagged liquidity: univariate and double sorts.

Each month ``t`` securities are ranked on a variable known at the end of
``t`` and grouped into portfolios; the portfolio return is the (equal- or
value-weighted) mean of ``ret_next``, the return of month ``t + 1``. Rows keep
the panel's dating: a row keyed ``month = t`` holds the return earned over
month ``t + 1``.

Conventions of this project (common practice in the cross-sectional
literature, e.g. Fama & French 1993 for breakpoints from a reference
universe):

* Breakpoints: for ``n`` portfolios, the ``k/n`` quantiles (``k = 1..n-1``)
  of the sort variable among the month's breakpoint-universe securities, with
  linear interpolation between order statistics (numpy's default
  ``linear`` method: position ``q (m - 1)`` in the sorted ``m`` values).
* Assignment: a security goes to portfolio ``k`` when
  ``breakpoint_{k-1} < value <= breakpoint_k`` (ties at a breakpoint go to
  the lower portfolio); portfolio 1 holds the lowest values.
* Breakpoints ``pooled`` (the default) come from every market's securities
  together; ``per_market`` forms them within each market (the panel's
  ``market`` column, several markets in one run), so each market's
  securities spread over all ``n`` portfolios whatever the level of its
  measure; the portfolios then pool the markets' members (common practice
  in international sorts, where liquidity levels differ by market).
* A month (or, in a dependent sort, a first-stage group of a month) whose
  breakpoint universe has fewer than ``n`` securities has no breakpoints;
  its securities are not assigned and the month is counted.
* A portfolio-month with fewer than ``min_securities`` members gets a missing
  return (counted in ``thin_portfolio_months``).
* Value weights are the ``weight`` column at the end of month ``t`` (e.g.
  ``market_cap``), so no information from month ``t + 1`` is used.
* High-minus-low: portfolio ``n`` minus portfolio 1 in each month where both
  have a return; its mean gets a Newey & West (1987) t-statistic
  (:func:`liqpanel.models.newey_west.newey_west_mean`).
"""

from __future__ import annotations

from dataclasses import dataclass

import polars as pl

from liqpanel.models.newey_west import newey_west_mean
from liqpanel.models.portfolio_steps import (
    assign, breakpoint_groups, check_inputs, complete_grid, high_minus_low_series, month_grid, portfolio_returns,
    portfolio_summary, usable_rows,
)


@dataclass(frozen=True)
class HighMinusLow:
    """Mean of a monthly long-short return series with its Newey-West t-statistic.

    ``mean`` and ``std_error`` are in decimal return per month; ``n_months``
    counts the months with a value; ``lags`` is the bandwidth used.
    """

    mean: float
    std_error: float
    tstat: float
    n_months: int
    lags: int

    @classmethod
    def from_series(cls, values, lags: int | None) -> "HighMinusLow":
        out = newey_west_mean(values, lags=lags)
        return cls(out["mean"], out["std_error"], out["tstat"], int(out["n"]), int(out["lags"]))


@dataclass(frozen=True)
class SortResult:
    """Univariate sort.

    ``returns``: month, portfolio, ret, n_securities (one row per month with
    breakpoints and portfolio 1..n; ``ret`` missing for thin portfolios).
    ``summary``: portfolio, mean_ret, std_error, tstat (Newey-West), n_months,
    mean_n_securities, then the time-series average of each requested
    characteristic's monthly equal-weighted portfolio mean.
    ``hml``: portfolio n minus 1; ``hml_returns``: month, ret.
    ``breakpoints``: month, n_universe, breakpoint_1..breakpoint_{n-1}.
    ``nobs``: security-months assigned to a portfolio; ``nobs_dropped``: rows
    left out for a missing sort value, return or (value weights) a missing or
    non-positive weight; ``unassigned``: complete rows in months without
    breakpoints.
    """

    returns: pl.DataFrame
    summary: pl.DataFrame
    hml: HighMinusLow
    hml_returns: pl.DataFrame
    breakpoints: pl.DataFrame
    nobs: int
    nobs_dropped: int
    unassigned: int
    months_without_breakpoints: int
    thin_portfolio_months: int
    on: str
    n: int
    weight: str | None


@dataclass(frozen=True)
class DoubleSortResult:
    """Double sort (``first`` then ``second``).

    ``returns``: month, portfolio_first, portfolio_second, ret, n_securities.
    ``summary``: one row per (portfolio_first, portfolio_second) cell as in
    :class:`SortResult`. ``hml_by_first``: for each first-stage group, the
    ``second``-sort high-minus-low (portfolio n2 minus 1): portfolio_first,
    mean_ret, std_error, tstat, n_months. ``hml_returns``: month, ret = the
    average of those spreads across the first-stage groups, in months where
    every group has one; ``hml`` summarises it. ``months_without_breakpoints``:
    months left out because the first sort, or (dependent sort) the second
    sort within any first-stage group, had fewer universe securities than
    portfolios.
    """

    returns: pl.DataFrame
    summary: pl.DataFrame
    hml_by_first: pl.DataFrame
    hml: HighMinusLow
    hml_returns: pl.DataFrame
    nobs: int
    nobs_dropped: int
    unassigned: int
    months_without_breakpoints: int
    thin_portfolio_months: int
    first: str
    second: str
    n1: int
    n2: int
    dependent: bool
    weight: str | None



def sort_portfolios(
    panel: pl.DataFrame,
    on: str,
    n: int = 5,
    weight: str | None = None,
    breakpoint_universe: str | None = None,
    min_securities: int = 5,
    ret: str = "ret_next",
    characteristics: list[str] | tuple[str, ...] = (),
    lags: int | None = 6,
    breakpoints: str = "pooled",
) -> SortResult:
    """Univariate portfolio sort of next month's return on ``on``.

    Formula: each month ``t`` compute breakpoints ``B_k`` = the ``k/n``
    quantile (linear interpolation) of ``on`` among the breakpoint universe,
    assign ``P_i = 1 + #{k : x_i > B_k}``, and form
    ``R_p,t+1 = sum_{i in p} w_i r_i,t+1 / sum_{i in p} w_i`` with ``w_i = 1``
    (equal weights) or ``w_i = weight_i,t`` (value weights, e.g. market value
    at the end of ``t``). High-minus-low ``R_n - R_1`` with a Newey & West
    (1987) t-statistic (Bartlett kernel, ``lags``; ``None``: Newey & West 1994
    rule). Units: decimal returns per month, dated by the formation month
    (like ``ret_next``). Assumptions: ``on`` and ``weight`` are known at the
    end of month ``t``. Method: the portfolio-sort test of Fama & MacBeth
    (1973) / Fama & French (1992) applied to liquidity as in Amihud (2002).
    See the module docstring for the breakpoint and assignment conventions;
    ``breakpoints="per_market"`` forms ``B_k`` within each month and market.
    """
    characteristics = list(characteristics)
    groups = breakpoint_groups(breakpoints)
    lazy = check_inputs(panel, [on, ret], weight, breakpoint_universe, characteristics, {"n": n}, min_securities,
                         groups)
    frame = usable_rows(lazy, [on, ret], weight, breakpoint_universe, characteristics, groups)
    counts = frame.select(pl.len().alias("rows"), pl.col("_complete").sum().alias("complete")).collect()
    complete = frame.filter(pl.col("_complete"))
    assigned, bps = assign(complete, on, n, ["month", *groups], "portfolio")
    cells = portfolio_returns(assigned.filter(pl.col("portfolio").is_not_null()), ["portfolio"], ret, weight,
                               characteristics)
    bps = bps.sort("month", *groups).collect()
    valid_months = bps.filter(pl.col("n_universe") >= n).select("month").unique().sort("month")
    result_cells = complete_grid(cells, month_grid(valid_months.lazy(), {"portfolio": n}), ["portfolio"],
                                  min_securities, characteristics)
    nobs = int(result_cells.get_column("n_securities").sum())
    returns = result_cells.select("month", "portfolio", "ret", "n_securities")
    summary = portfolio_summary(result_cells, ["portfolio"], characteristics, lags)
    hml_returns = high_minus_low_series(result_cells, "portfolio", n, [])
    n_complete = int(counts.item(0, "complete"))
    return SortResult(
        returns=returns,
        summary=summary,
        hml=HighMinusLow.from_series(hml_returns.get_column("ret").to_numpy(), lags),
        hml_returns=hml_returns,
        breakpoints=bps.select("month", *groups, "n_universe", *[f"breakpoint_{k}" for k in range(1, n)]),
        nobs=nobs,
        nobs_dropped=int(counts.item(0, "rows")) - n_complete,
        unassigned=n_complete - nobs,
        months_without_breakpoints=bps.select("month").n_unique() - valid_months.height,
        thin_portfolio_months=int(result_cells.filter(pl.col("n_securities") < min_securities).height),
        on=on,
        n=n,
        weight=weight,
    )


def double_sort(
    panel: pl.DataFrame,
    first: str,
    second: str,
    n1: int = 3,
    n2: int = 3,
    dependent: bool = True,
    weight: str | None = None,
    breakpoint_universe: str | None = None,
    min_securities: int = 5,
    ret: str = "ret_next",
    characteristics: list[str] | tuple[str, ...] = (),
    lags: int | None = 6,
    breakpoints: str = "pooled",
) -> DoubleSortResult:
    """Two-way portfolio sort: ``first`` into ``n1`` groups, ``second`` into ``n2``.

    Dependent (conditional) sort: each month, securities are grouped on
    ``first``; within each group, breakpoints of ``second`` are the ``k/n2``
    quantiles among that group's breakpoint-universe members, so each cell
    controls for ``first``. Independent sort (``dependent=False``): both
    breakpoints come from the whole month's universe and the cells are the
    intersections. Returns and conventions as :func:`sort_portfolios`.
    The spread of interest is the ``second`` high-minus-low within each
    ``first`` group, ``HML_g,t = R_(g,n2),t - R_(g,1),t``, averaged with equal
    weight across the ``n1`` groups, ``HML_t = (1/n1) sum_g HML_g,t``, in
    months where every group has both corner portfolios; its mean carries a
    Newey & West (1987) t-statistic. Units: decimal monthly returns dated by
    the formation month. Method: the conditional sort used to build
    characteristic-controlled factors, e.g. Fama & French (1993).
    ``breakpoints="per_market"``: both stages' breakpoints within each market;
    a month counts when at least one market has all its breakpoints.
    """
    characteristics = list(characteristics)
    if first == second:
        raise ValueError(f"double_sort needs two different columns, got '{first}' twice")
    groups = breakpoint_groups(breakpoints)
    lazy = check_inputs(panel, [first, second, ret], weight, breakpoint_universe, characteristics,
                         {"n1": n1, "n2": n2}, min_securities, groups)
    frame = usable_rows(lazy, [first, second, ret], weight, breakpoint_universe, characteristics, groups)
    counts = frame.select(pl.len().alias("rows"), pl.col("_complete").sum().alias("complete")).collect()
    complete = frame.filter(pl.col("_complete"))
    labels = ["portfolio_first", "portfolio_second"]
    stage1, bps1 = assign(complete, first, n1, ["month", *groups], "portfolio_first")
    if dependent:
        stage2, bps2 = assign(stage1.filter(pl.col("portfolio_first").is_not_null()), second, n2,
                               ["month", *groups, "portfolio_first"], "portfolio_second")
    else:
        stage2, bps2 = assign(stage1, second, n2, ["month", *groups], "portfolio_second")
    assigned = stage2.filter(pl.col("portfolio_first").is_not_null() & pl.col("portfolio_second").is_not_null())

    bps1 = bps1.collect()
    bps2 = bps2.collect()
    months1 = bps1.filter(pl.col("n_universe") >= n1).select("month", *groups)
    if dependent:
        valid_groups = bps2.filter(pl.col("n_universe") >= n2).select("month", *groups, "portfolio_first")
        # A month (of a market) counts only if every first-stage group has second-stage breakpoints.
        full = valid_groups.group_by("month", *groups).len().filter(pl.col("len") == n1).select("month", *groups)
        valid = months1.join(full, on=["month", *groups], how="inner")
    else:
        months2 = bps2.filter(pl.col("n_universe") >= n2).select("month", *groups)
        valid = months1.join(months2, on=["month", *groups], how="inner")
    valid_months = valid.select("month").unique().sort("month")
    if groups:  # a market's month without all its breakpoints leaves its securities out of the cells
        assigned = assigned.join(valid.lazy(), on=["month", *groups], how="semi")
    cells = portfolio_returns(assigned, labels, ret, weight, characteristics)
    grid = month_grid(valid_months.lazy(), {"portfolio_first": n1, "portfolio_second": n2})
    result_cells = complete_grid(cells, grid, labels, min_securities, characteristics)
    nobs = int(result_cells.get_column("n_securities").sum())

    by_first = high_minus_low_series(result_cells, "portfolio_second", n2, ["portfolio_first"])
    hml_by_first_rows = []
    for g in range(1, n1 + 1):
        series = by_first.filter(pl.col("portfolio_first") == g).get_column("ret").to_numpy()
        s = newey_west_mean(series, lags=lags)
        hml_by_first_rows.append((g, s["mean"], s["std_error"], s["tstat"], int(s["n"])))
    hml_by_first = pl.DataFrame(
        hml_by_first_rows,
        schema={"portfolio_first": pl.Int32, "mean_ret": pl.Float64, "std_error": pl.Float64,
                "tstat": pl.Float64, "n_months": pl.Int64},
        orient="row",
    )
    hml_returns = (
        by_first.group_by("month")
        .agg(pl.col("ret").mean(), pl.len().alias("_groups"))
        .filter(pl.col("_groups") == n1)
        .select("month", "ret")
        .sort("month")
    )
    n_complete = int(counts.item(0, "complete"))
    return DoubleSortResult(
        returns=result_cells.select("month", *labels, "ret", "n_securities"),
        summary=portfolio_summary(result_cells, labels, characteristics, lags),
        hml_by_first=hml_by_first,
        hml=HighMinusLow.from_series(hml_returns.get_column("ret").to_numpy(), lags),
        hml_returns=hml_returns,
        nobs=nobs,
        nobs_dropped=int(counts.item(0, "rows")) - n_complete,
        unassigned=n_complete - nobs,
        months_without_breakpoints=bps1.select("month").n_unique() - valid_months.height,
        thin_portfolio_months=int(result_cells.filter(pl.col("n_securities") < min_securities).height),
        first=first,
        second=second,
        n1=n1,
        n2=n2,
        dependent=dependent,
        weight=weight,
    )
