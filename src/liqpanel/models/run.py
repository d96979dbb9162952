"""The models stage: every configured regression, sort, factor and check.

``run_models`` returns named result tables, each with a caption and a note,
which the report stage renders (CSV, LaTeX, Markdown) without knowing what
they hold. Monthly return series come back too, for the figures.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import polars as pl

from liqpanel.models.factor import factor_summary, liquidity_factor, summary_table
from liqpanel.models.model_spec import ModelSpec
from liqpanel.models.regression_table import regression_table
from liqpanel.models.regressions import fit_model
from liqpanel.models.sorts import double_sort, sort_portfolios
from liqpanel.models.validation import validate_proxies


@dataclass
class ResultTable:
    name: str
    frame: pl.DataFrame
    caption: str
    notes: str = ""


@dataclass
class ModelOutputs:
    tables: list[ResultTable] = field(default_factory=list)
    series: dict[str, pl.DataFrame] = field(default_factory=dict)  # name -> month, label, ret
    regressions_long: pl.DataFrame | None = None


def _weight(option: str | None) -> str | None:
    return None if option in (None, "equal") else ("market_cap" if option == "value" else option)


def _hml_row(label: str, hml) -> dict[str, Any]:
    return {"portfolio": label, "mean_ret": hml.mean, "std_error": hml.std_error, "tstat": hml.tstat, "n_months": hml.n_months}


def _sort_table(spec: dict, panel: pl.DataFrame, lags: int | None) -> tuple[ResultTable, pl.DataFrame]:
    name, on = spec["name"], spec["variable"]
    weight = _weight(spec.get("weight"))
    common = dict(
        weight=weight,
        breakpoint_universe=spec.get("breakpoint_universe"),
        min_securities=spec.get("min_securities", 5),
        characteristics=tuple(spec.get("characteristics", ())),
        lags=spec.get("lags", lags),
        breakpoints=spec.get("breakpoints", "pooled"),
    )
    scheme = "value-weighted (market value at the end of the sorting month)" if weight else "equal-weighted"
    if spec.get("within"):
        res = double_sort(
            panel, first=spec["within"], second=on, n1=spec.get("within_portfolios", 2),
            n2=spec.get("portfolios", 3), dependent=True, **common,
        )
        summary = res.summary.with_columns(
            pl.format("{}-{}", pl.col("portfolio_first"), pl.col("portfolio_second")).alias("portfolio")
        ).drop("portfolio_first", "portfolio_second")
        summary = summary.select("portfolio", *[c for c in summary.columns if c != "portfolio"])
        hml = pl.DataFrame([_hml_row(f"high-low {on} (avg over {spec['within']} groups)", res.hml)])
        caption = f"Dependent double sort: {spec['within']}, then {on} within {spec['within']} groups"
        returns = res.returns.with_columns(
            pl.format("{}-{}", pl.col("portfolio_first"), pl.col("portfolio_second")).alias("portfolio")
        )
        series = pl.concat(
            [returns.select("month", "portfolio", "ret"),
             res.hml_returns.select("month", pl.lit("high-low").alias("portfolio"), "ret")]
        )
    else:
        res = sort_portfolios(panel, on=on, n=spec.get("portfolios", 5), **common)
        summary = res.summary.with_columns(pl.col("portfolio").cast(pl.String))
        hml = pl.DataFrame([_hml_row("high-low", res.hml)])
        caption = f"Portfolios sorted on {on}: next-month returns"
        series = pl.concat(
            [res.returns.select("month", pl.col("portfolio").cast(pl.String), "ret"),
             res.hml_returns.select("month", pl.lit("high-low").alias("portfolio"), "ret")]
        )
    table = pl.concat([summary, hml], how="diagonal_relaxed")
    notes = (
        f"{scheme}; breakpoints from "
        f"{'the securities flagged by ' + spec['breakpoint_universe'] if spec.get('breakpoint_universe') else 'all securities'}"
        f"{' of each market, within the market' if common['breakpoints'] == 'per_market' else ''}; "
        f"portfolios with fewer than {common['min_securities']} securities are left out that month; "
        f"t-statistics Newey & West (1987), {res.hml.lags} lags; decimal returns per month."
    )
    return ResultTable(f"sort_{name}", table, caption, notes), series.sort("month", "portfolio")


def run_models(
    panel: pl.DataFrame,
    models: dict[str, Any],
    *,
    monthly: pl.DataFrame | None = None,
    factors: pl.DataFrame | None = None,
    sources: str = "",
) -> ModelOutputs:
    out = ModelOutputs()
    lags = models.get("lags", 6)

    specs = [ModelSpec.from_config(m) for m in models.get("regressions", [])]
    if specs:
        results = [fit_model(panel, s) for s in specs]
        out.tables.append(
            ResultTable(
                "regressions",
                regression_table(results, stars=models.get("stars", False)),
                "Regressions of next-month return on liquidity",
                "t-statistics in parentheses; "
                + "; ".join(f"{r.name}: {r.estimator}, {r.covariance}" + (f" ({r.lags} lags)" if getattr(r, "lags", None) is not None else "") for r in results)
                + (". " + sources if sources else ""),
            )
        )
        out.regressions_long = pl.DataFrame(
            [
                {"model": r.name, "estimator": r.estimator, "covariance": r.covariance, "variable": v,
                 "coef": r.params[v], "std_error": r.std_errors[v], "tstat": r.tstats[v], "pvalue": r.pvalues[v],
                 "nobs": r.nobs, "n_months": r.n_months, "r2": r.r2}
                for r in results for v in r.params
            ],
            schema_overrides={"nobs": pl.Int64, "n_months": pl.Int64},
        )

    for spec in models.get("sorts", []):
        table, series = _sort_table(spec, panel, lags)
        out.tables.append(table)
        out.series[table.name] = series

    fac = models.get("factor")
    if fac:
        factor = liquidity_factor(
            panel, measure=fac["measure"], size=fac.get("size", "log_size"), n_size=fac.get("size_groups", 2),
            n_liq=fac.get("liquidity_groups", 3), weight=_weight(fac.get("weight")),
            min_securities=fac.get("min_securities", 5), high_is_illiquid=fac.get("high_is_illiquid", True),
            breakpoints=fac.get("breakpoints", "pooled"),
        )
        summary = factor_summary(factor, factors, lags=fac.get("lags", lags))
        out.tables.append(
            ResultTable(
                "liquidity_factor",
                summary_table(summary),
                f"Traded liquidity factor: illiquid-minus-liquid on {fac['measure']} within size groups",
                f"{fac.get('size_groups', 2)} size groups x {fac.get('liquidity_groups', 3)} liquidity groups "
                "(dependent sort"
                + ("; breakpoints within each market" if fac.get("breakpoints") == "per_market" else "")
                + "); returns dated by formation month, earned the month after, in decimals per month; "
                f"Newey & West (1987) t-statistics, {fac.get('lags', lags)} lags"
                + (f"; alphas and betas against the factor returns supplied ({', '.join(summary['betas'])})"
                   if "alpha" in summary else "; no factor returns supplied, so no alpha") + ".",
            )
        )
        out.series["liquidity_factor"] = factor.select("month", pl.lit("factor").alias("portfolio"), pl.col("factor_ret").alias("ret"))

    val = models.get("validation")
    if val and monthly is not None:
        tables = [("proxy_validation", val, "Low-frequency proxies", "pooled bias and RMSE.")]
        if val.get("price_impact"):
            tables.append(("impact_validation", val["price_impact"], "Low-frequency price-impact proxies",
                           "bias and RMSE only where proxy and benchmark share a unit (correlations are unitless; a "
                           "depth measure such as the Amivest ratio correlates negatively)."))
        for name, spec, label, errors in tables:
            proxies = [p for p in spec["proxies"] if p in monthly.columns]
            if spec["benchmark"] in monthly.columns and proxies:
                out.tables.append(
                    ResultTable(
                        name,
                        validate_proxies(monthly, spec["benchmark"], proxies),
                        f"{label} against the high-frequency benchmark {spec['benchmark']}",
                        "In the spirit of Goyenko, Holden & Trzcinka (2009): mean monthly cross-sectional "
                        f"correlations, time-series correlation of market-wide averages, {errors}",
                    )
                )
    return out
