"""How well low-frequency liquidity proxies track a high-frequency benchmark.

In the spirit of Goyenko, Holden & Trzcinka (2009, "Do liquidity measures
measure liquidity?"): for each proxy, compare the monthly security-level
values with the benchmark (e.g. the trade-based effective spread) by
cross-sectional correlation, time-series correlation of market-wide averages,
and prediction error.
"""

from __future__ import annotations

import polars as pl

from liqpanel.core.errors import InputError

KEY = ("security", "month")
MIN_PAIRS = 3  # fewest security pairs for a month's cross-sectional correlation


def validate_proxies(monthly: pl.DataFrame, benchmark: str, proxies: list[str]) -> pl.DataFrame:
    """One row per proxy comparing it with ``benchmark`` over security-months.

    Uses, for each proxy, the security-months where both the proxy and the
    benchmark are present and finite (``n_security_months``). Columns:

    * ``mean_cs_pearson`` / ``mean_cs_spearman``: each month, the Pearson
      (Spearman rank) correlation across securities of proxy and benchmark;
      then the equal-weighted average over months with at least 3
      securities and non-constant values (``n_months_cs``);
    * ``ts_corr_market``: Pearson correlation over months of the
      equal-weighted cross-sectional averages of proxy and benchmark (the
      market-wide liquidity series), over months with at least one pair
      (``n_months``);
    * ``mean_bias``: average of ``proxy - benchmark`` over all the
      security-months (pooled); ``rmse``: ``sqrt(mean((proxy - benchmark)^2))``
      over the same.

    Units: bias and RMSE in the units of the measures (spreads are
    proportional, 0.01 = 1%); correlations are unitless. Assumes proxy and
    benchmark are measured for the same security-month. Method: Goyenko,
    Holden & Trzcinka (2009), who report average cross-sectional
    correlations, portfolio/time-series correlations and RMSE of each
    low-frequency proxy against the high-frequency benchmark.
    Output sorted in the order of ``proxies``.
    """
    if isinstance(proxies, str):
        proxies = [proxies]
    proxies = list(proxies)
    if not proxies:
        raise ValueError("validate_proxies needs at least one proxy column")
    if len(set(proxies)) != len(proxies):
        raise ValueError(f"proxies repeat a column: {proxies}")
    if benchmark in proxies:
        raise ValueError(f"the benchmark '{benchmark}' is also listed as a proxy")
    lazy = monthly.lazy() if isinstance(monthly, pl.DataFrame) else monthly
    schema = lazy.collect_schema()
    for column in (*KEY, benchmark, *proxies):
        if column not in schema.names():
            raise InputError(
                f"proxy validation needs a column '{column}' in the monthly table, which has "
                f"{sorted(schema.names())}",
                column=column,
            )
    for column in (benchmark, *proxies):
        if not schema[column].is_numeric():
            raise InputError(f"monthly column '{column}' must be numeric, found {schema[column]}", column=column)

    long = (
        lazy.select(*KEY, pl.col(benchmark).cast(pl.Float64).alias("_bench"),
                    *[pl.col(p).cast(pl.Float64) for p in proxies])
        .unpivot(index=[*KEY, "_bench"], on=proxies, variable_name="proxy", value_name="_value")
        .filter(
            pl.col("_bench").is_not_null() & pl.col("_bench").is_finite()
            & pl.col("_value").is_not_null() & pl.col("_value").is_finite()
        )
    )
    # Floating-point sums depend on the order of their terms; every aggregate
    # below orders its inputs by a key first, so the result does not depend
    # on how the engine happened to partition the rows.
    by_security = lambda c: pl.col(c).sort_by("security")  # noqa: E731
    per_month = (
        long.group_by("proxy", "month")
        .agg(
            pl.len().alias("_pairs"),
            pl.corr(by_security("_value"), by_security("_bench"), method="pearson").alias("_pearson"),
            # Spearman = Pearson of average ranks (ties share their mean rank)
            pl.corr(by_security("_value").rank("average"), by_security("_bench").rank("average")).alias("_spearman"),
            by_security("_value").mean().alias("_value_mean"),
            by_security("_bench").mean().alias("_bench_mean"),
        )
        .with_columns(
            [
                pl.when((pl.col("_pairs") >= MIN_PAIRS) & pl.col(c).is_finite()).then(pl.col(c)).otherwise(None)
                .alias(c)
                for c in ("_pearson", "_spearman")
            ]
        )
    )
    by_month = lambda c: pl.col(c).sort_by("month")  # noqa: E731
    per_month = per_month.collect(engine="in-memory").sort("proxy", "month").lazy()
    cross = per_month.group_by("proxy").agg(
        by_month("_pearson").mean().alias("mean_cs_pearson"),
        by_month("_spearman").mean().alias("mean_cs_spearman"),
        pl.col("_pearson").is_not_null().sum().cast(pl.Int64).alias("n_months_cs"),
        pl.corr(by_month("_value_mean"), by_month("_bench_mean"), method="pearson").alias("ts_corr_market"),
        pl.len().cast(pl.Int64).alias("n_months"),
    )
    error = (pl.col("_value") - pl.col("_bench")).sort_by("month", "security")
    errors = long.group_by("proxy").agg(
        error.mean().alias("mean_bias"),
        (error**2).mean().sqrt().alias("rmse"),
        pl.len().cast(pl.Int64).alias("n_security_months"),
    )
    order = pl.LazyFrame({"proxy": proxies, "_order": list(range(len(proxies)))})
    return (
        order.join(cross, on="proxy", how="left")
        .join(errors, on="proxy", how="left")
        .with_columns(pl.col("n_security_months", "n_months", "n_months_cs").fill_null(0))
        .sort("_order")
        .select(
            "proxy",
            pl.lit(benchmark).alias("benchmark"),
            "mean_cs_pearson",
            "mean_cs_spearman",
            "n_months_cs",
            "ts_corr_market",
            "mean_bias",
            "rmse",
            "n_security_months",
            "n_months",
        )
        .collect(engine="in-memory")
    )
