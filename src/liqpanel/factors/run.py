"""The factors stage: market liquidity, its innovations, liquidity betas, traded factor, commonality.

``run_factors`` takes the analysis panel and the ``factors:`` section of
the config and returns named result tables (rendered by the report stage
like the models' tables), series for the figures, and the factor series
themselves: one row per calendar month, one column per factor, ready to be
merged into another project's regressions (see :data:`FACTOR_UNITS`).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import polars as pl

from liqpanel.core.errors import InputError
from liqpanel.factors import acharya_pedersen as ap
from liqpanel.factors.aggregate import INNOVATION_SCALE, aggregate_liquidity, liquidity_innovations
from liqpanel.factors.betas import (
    LIQ, formation_betas, liquidity_betas, monthly_returns, post_ranking_betas, value_weighted_market,
)
from liqpanel.factors.commonality import commonality_regressions, commonality_summary, liquidity_changes
from liqpanel.factors.ols import grouped_ols
from liqpanel.models.factor import factor_summary, summary_table
from liqpanel.models.run import ResultTable
from liqpanel.models.sorts import sort_portfolios
from liqpanel.core.stable import ordered_mean, ordered_sum

PS = "Pastor & Stambaugh (2003), Journal of Political Economy 111(3)"
AP = "Acharya & Pedersen (2005), Journal of Financial Economics 77(2)"
CRS = "Chordia, Roll & Subrahmanyam (2000), Journal of Financial Economics 56(1)"

FACTOR_UNITS = {
    "liq_level": "market liquidity level (m_t/m_1) x mean gamma, return per unit of signed dollar volume "
                 "(the ps_gamma unit, millions by default); month t",
    "liq_innovation": "innovation L_t = AR residual / 100, same unit / 100; month t",
    "liq_traded": "traded liquidity factor: high-minus-low liquidity-beta portfolio return, decimal per month, "
                  "earned in month t",
    "illiq_market": "market illiquidity c_M: value-weighted normalised Amihud illiquidity, percent of the price; "
                    "month t",
    "illiq_innovation": "innovation in market illiquidity from the AR(2) regression, percent of the price; month t",
}


@dataclass
class FactorOutputs:
    tables: list[ResultTable] = field(default_factory=list)
    aggregate: pl.DataFrame | None = None   # month, level, change, innovation
    deciles: pl.DataFrame | None = None     # portfolio, mean_ret, post-ranking beta
    factors: pl.DataFrame | None = None     # month, one column per factor


def _market(panel: pl.DataFrame, supplied: pl.DataFrame | None, settings: dict) -> tuple[pl.DataFrame, str]:
    """``month``, ``mkt`` (+ controls, risk-free) dated by the month earned, and a note on its source."""
    market = settings.get("market")
    controls = list(settings.get("controls", []))
    rf = settings.get("risk_free")
    wanted = [c for c in (market, *controls, rf) if c]
    if supplied is not None and wanted:
        missing = [c for c in wanted if c not in supplied.columns]
        if missing:
            raise InputError(f"factors: the supplied factor file has no column(s) {missing}; it has {supplied.columns}",
                             column=missing[0])
    if market and supplied is None:
        raise InputError(f"factors: market column '{market}' named, but no factor file is given (inputs.factors)")
    if market:
        frame = supplied.select("month", pl.col(market).alias("mkt"), *controls, *([rf] if rf else []))
        return frame, f"market factor: supplied column '{market}'"
    if controls or rf:
        raise InputError("factors: controls and risk_free need a supplied factor file (inputs.factors)")
    size = settings.get("size", "market_cap")
    return value_weighted_market(panel, size=size), f"market factor: the panel's {size}-weighted return"


def _aggregate_tables(agg: pl.DataFrame, scaled: bool) -> list[ResultTable]:
    design = agg.sort("month").with_columns(
        pl.col("change").shift(1).alias("change_lag"), pl.col("level").shift(1).alias("level_lag"),
        (pl.col("month").shift(1) == pl.col("month").dt.offset_by("-1mo")).alias("_consecutive"),
    ).filter(pl.col("_consecutive"))
    fit = grouped_ols(design.with_columns(pl.lit("all").alias("_g")), "change", ["change_lag", "level_lag"], "_g",
                      min_obs=4)
    names = {"intercept": "a (intercept)", "change_lag": "b (change, t-1)", "level_lag": "c (scaled level, t-1)"}
    coef = pl.DataFrame({
        "term": list(names.values()),
        "coef": [fit.get_column(f"coef_{n}").item() for n in names],
        "std_error": [fit.get_column(f"se_{n}").item() for n in names],
        "tstat": [fit.get_column(f"tstat_{n}").item() for n in names],
        "n_months": [int(fit.get_column("n_obs").item())] * 3,
        "r2": [fit.get_column("r2").item()] * 3,
    })
    scale_note = ("scaled by m_t/m_1, the market value at the end of t-1 of the securities in the month's average "
                  "over that of the first month" if scaled else "unscaled (no market value column in the panel)")
    return [
        ResultTable(
            "liquidity_aggregate",
            agg.select("month", "n_securities", "scale", "level", "change", "innovation"),
            "Market-wide liquidity: level, change and innovation by month",
            f"{PS}: securities with ps_gamma in both the month and the month before; level and change "
            f"{scale_note}; innovation = residual of the AR regression / {INNOVATION_SCALE:g}. "
            "Units: return per unit of signed dollar volume (ps_gamma's unit).",
        ),
        ResultTable(
            "liquidity_innovation_regression",
            coef,
            "AR regression of the change in market liquidity (innovations are its residuals)",
            f"{PS}: change_t = a + b change_t-1 + c level_t-1 + u_t, OLS; plain standard errors.",
        ),
    ]


def run_factors(
    panel: pl.DataFrame, settings: dict[str, Any], *, supplied: pl.DataFrame | None = None, lags: int | None = 6,
    truth: pl.DataFrame | None = None, recovery_measures: list[str] = (), daily: pl.DataFrame | None = None,
) -> FactorOutputs:
    """Every factor the ``factors:`` config section selects (see the schema for the keys).

    With a simulator's ``truth`` that carries a planted liquidity shock, also
    the table ``liquidity_shock_recovery`` (:mod:`liqpanel.factors.recovery`)
    over ``recovery_measures`` and the factor series built here. ``daily``
    (the daily table) serves the daily commonality regressions.
    """
    out = FactorOutputs()
    series: list[pl.DataFrame] = []
    agg_settings = settings.get("aggregate")
    innovations = None
    if agg_settings is not None:
        size = agg_settings.get("size", "market_cap")
        scaled = bool(size) and size in panel.columns
        agg = liquidity_innovations(
            aggregate_liquidity(panel, gamma=agg_settings.get("gamma", "ps_gamma"), size=size if scaled else None)
        )
        out.aggregate = agg
        out.tables += _aggregate_tables(agg, scaled)
        innovations = agg.select("month", pl.col("innovation").alias(LIQ)).filter(pl.col(LIQ).is_not_null())
        series.append(agg.select("month", pl.col("level").alias("liq_level"), pl.col("innovation").alias(LIQ)))

    ap_settings = settings.get("acharya_pedersen")
    illiq_innovations = None
    if ap_settings is not None:
        tables, market_series = _acharya_pedersen(panel, ap_settings, supplied, lags)
        out.tables += tables
        series.append(market_series)
        # as an L_t: positive = more liquid, in decimals of the price
        illiq_innovations = market_series.select("month", (-pl.col("illiq_innovation") / 100).alias(LIQ)).filter(
            pl.col(LIQ).is_not_null()
        )

    beta_settings = settings.get("betas")
    if beta_settings is not None:
        source = beta_settings.get("innovation", "pastor_stambaugh")
        chosen = innovations if source == "pastor_stambaugh" else illiq_innovations
        if chosen is None:
            needed = "aggregate" if source == "pastor_stambaugh" else "acharya_pedersen"
            raise InputError(f"factors.betas with innovation '{source}' needs factors.{needed} (the series L_t)")
        table, deciles, traded, betas = _beta_sort(panel, beta_settings, chosen, supplied, lags)
        out.tables += table
        out.deciles = deciles
        series.append(traded)

    com = settings.get("commonality")
    if com is not None:
        out.tables.append(_commonality_table(panel, com, supplied, daily))

    if truth is not None and "liquidity_shock" in truth.columns:
        out.tables.append(_recovery_table(panel, truth, list(recovery_measures), series,
                                          betas if beta_settings is not None else None))

    if series:
        merged = series[0]
        for s in series[1:]:
            merged = merged.join(s, on="month", how="full", coalesce=True)
        out.factors = merged.sort("month").with_columns(pl.col(pl.Float64).fill_nan(None))
    return out


def _beta_sort(panel, settings, innovations, supplied, lags):
    market, market_note = _market(panel, supplied, settings)
    rf = settings.get("risk_free")
    regressors = market.join(innovations, on="month", how="inner").sort("month")
    window, min_months = settings.get("window", 60), settings.get("min_months", 36)
    betas = liquidity_betas(monthly_returns(panel), regressors, window=window, min_months=min_months, risk_free=rf)
    rebalance = settings.get("rebalance", "annual")
    formed = formation_betas(betas, rebalance)
    if formed.height == 0:
        return _no_betas(window, min_months), None, pl.DataFrame(schema={"month": pl.Date, "liq_traded": pl.Float64}), betas
    weight = settings.get("weight", "value")
    weight_col = None if weight == "equal" else ("market_cap" if weight == "value" else weight)
    n = settings.get("portfolios", 10)
    lags = settings.get("lags", lags)
    res = sort_portfolios(
        panel.join(formed, on=["security", "month"], how="left"), on="liq_beta", n=n, weight=weight_col,
        min_securities=settings.get("min_securities", 5), characteristics=["liq_beta"], lags=lags,
    )
    post_input = pl.concat([
        res.returns.select("month", pl.col("portfolio").cast(pl.String), "ret"),
        res.hml_returns.select("month", pl.lit("high-low").alias("portfolio"), "ret"),
    ])
    post = post_ranking_betas(post_input, regressors, risk_free=rf).select(
        "portfolio", pl.col(f"coef_{LIQ}").alias("post_liq_beta"), pl.col(f"tstat_{LIQ}").alias("post_liq_beta_tstat")
    )
    summary = pl.concat([
        res.summary.with_columns(pl.col("portfolio").cast(pl.String)),
        pl.DataFrame([{"portfolio": "high-low", "mean_ret": res.hml.mean, "std_error": res.hml.std_error,
                       "tstat": res.hml.tstat, "n_months": res.hml.n_months}]),
    ], how="diagonal_relaxed").join(post, on="portfolio", how="left", maintain_order="left")
    summary = summary.rename({"liq_beta": "pre_liq_beta"}) if "liq_beta" in summary.columns else summary
    scheme = "value-weighted (market value at the end of the formation month)" if weight_col else "equal-weighted"
    when = "each December, held twelve months" if rebalance == "annual" else "every month"
    source = settings.get("innovation", "pastor_stambaugh")
    what = ("L_t, the innovation in Pastor-Stambaugh market liquidity" if source == "pastor_stambaugh" else
            f"L_t = minus the innovation in Acharya-Pedersen market illiquidity / 100 ({AP})")
    common_note = (
        f"{PS}: betas from OLS over the trailing {window} months (at least {min_months}) of excess returns on the "
        f"market factor{', ' + ', '.join(settings.get('controls', [])) if settings.get('controls') else ''} and "
        f"{what}; {market_note}."
    )
    traded = res.hml_returns.select("month", pl.col("ret").alias("factor_ret"))
    supplied_factors = None
    if supplied is not None and settings.get("market"):
        supplied_factors = supplied.select("month", settings["market"], *settings.get("controls", []))
    usable = traded.filter(pl.col("factor_ret").is_finite()).height
    if supplied_factors is not None and usable < supplied_factors.width + 3:
        supplied_factors = None  # too few months for the alpha regression: mean and t only
    perf = factor_summary(traded, supplied_factors, lags=lags) if usable >= 2 else None
    tables = [
        ResultTable(
            "liquidity_beta_portfolios",
            summary,
            f"Portfolios sorted on historical liquidity beta ({n} groups): post-formation returns and betas",
            f"{common_note} Formed {when}; {scheme}; returns earned the month after formation; pre_liq_beta: "
            "mean formation beta; post_liq_beta: full-sample slope of the portfolio's excess return on L_t with the "
            f"same factors; high-low t-statistic Newey & West (1987), {res.hml.lags} lags; decimal returns per month.",
        ),
        ResultTable(
            "liquidity_traded_factor",
            summary_table(perf) if perf is not None else _EMPTY_SUMMARY,
            "Traded liquidity factor: high minus low liquidity-beta portfolio",
            f"{common_note} Mean and alpha t-statistics Newey & West (1987); alphas against the supplied factors "
            "(matched by the month the return is earned); decimal returns per month.",
        ),
    ]
    deciles = summary.filter(pl.col("portfolio") != "high-low").select(
        "portfolio", "mean_ret", "post_liq_beta", *(["pre_liq_beta"] if "pre_liq_beta" in summary.columns else [])
    )
    series = traded.select(pl.col("month").dt.offset_by("1mo"), pl.col("factor_ret").alias("liq_traded"))
    return tables, deciles, series, betas


_EMPTY_SUMMARY = pl.DataFrame(schema={"statistic": pl.String, "value": pl.Float64})


def _no_betas(window: int, min_months: int) -> list[ResultTable]:
    note = (f"{PS}: no security has {min_months} months of returns within a {window}-month window in this sample, "
            "so no liquidity beta, portfolio or traded factor could be formed.")
    return [
        ResultTable("liquidity_beta_portfolios", pl.DataFrame(schema={"portfolio": pl.String, "mean_ret": pl.Float64}),
                    "Portfolios sorted on historical liquidity beta: none formed", note),
        ResultTable("liquidity_traded_factor", _EMPTY_SUMMARY,
                    "Traded liquidity factor: high minus low liquidity-beta portfolio (none formed)", note),
    ]


def _commonality_table(panel, settings, supplied, daily=None) -> ResultTable:
    market = None
    if settings.get("market_return", True):
        market, _ = _market(panel, supplied, {k: settings[k] for k in ("market", "size") if k in settings})
    rows = []
    change = settings.get("change", "proportional")
    for measure in settings.get("measures", []):
        fits = commonality_regressions(
            liquidity_changes(panel, measure, change), market, min_months=settings.get("min_months", 12)
        )
        rows.append({"measure": measure, "frequency": "monthly", **commonality_summary(fits)})
    daily_measures = settings.get("daily_measures", [])
    if daily_measures:
        if daily is None:
            raise InputError("factors.commonality.daily_measures needs the daily table")
        day_market = None
        if settings.get("market_return", True):
            # equal-weighted mean daily return of the securities (common practice)
            day_market = daily.group_by("date").agg(
                ordered_mean(pl.when(pl.col("ret").is_finite()).then(pl.col("ret"))).alias("mkt")
            )
        for measure in daily_measures:
            fits = commonality_regressions(
                liquidity_changes(daily, measure, change, time="date"), day_market,
                min_months=settings.get("min_days", 60), time="date",
            )
            rows.append({"measure": measure, "frequency": "daily", **commonality_summary(fits)})
    columns = ["measure", "frequency", "n_securities", "mean_months", "mean_concurrent", "tstat_concurrent",
               "share_positive", "share_positive_significant", "mean_lag", "mean_lead", "mean_sum", "mean_adj_r2"]
    frame = pl.DataFrame(rows, schema_overrides={"n_securities": pl.Int64}, infer_schema_length=None).select(
        [c for c in columns if any(c in r for r in rows)]
    ).rename({"mean_months": "mean_periods"}, strict=False) if rows else pl.DataFrame(
        {"measure": []}, schema={"measure": pl.String})
    return ResultTable(
        "liquidity_commonality",
        frame,
        "Commonality in liquidity: each security's liquidity change on the market's",
        f"{CRS}: per security, OLS of the {change} change in the measure (monthly: from the calendar month before; "
        "daily: from the trading day before) on the equal-weighted mean change of the other securities in "
        "periods t-1, t, t+1"
        + (" and the market return in t-1, t, t+1 (daily: the securities' equal-weighted mean return)"
           if market is not None else "")
        + "; cross-sectional means of the slopes, t-statistic of the concurrent mean from the cross-section "
        "(ignores correlation across securities), share positive and positive with t above the two-sided 5% "
        "critical value, mean adjusted R-squared; mean_periods: periods per regression.",
    )


def _recovery_table(panel, truth, measures, series, betas) -> ResultTable:
    from liqpanel.factors.recovery import beta_recovery, shock_recovery

    built = {}
    for frame in series:
        if "liq_innovation" in frame.columns:
            built["liq_innovation (Pastor-Stambaugh L_t)"] = frame.select("month", pl.col("liq_innovation").alias("value"))
        if "illiq_innovation" in frame.columns:
            built["-illiq_innovation (Acharya-Pedersen)"] = frame.select("month", (-pl.col("illiq_innovation")).alias("value"))
    table = shock_recovery(panel, truth, measures, built)
    if betas is not None and "liquidity_beta" in truth.columns:
        table = pl.concat([table, beta_recovery(betas, truth)])
    return ResultTable(
        "liquidity_shock_recovery",
        table,
        "Recovery of the simulator's planted market-wide liquidity shock and liquidity betas",
        "Simulated market only. Monthly series: minus the cross-sectional mean log change of each measure over "
        "securities present in both months (positive = more liquid), and the factor series built here, each "
        "correlated (Pearson) with the planted innovation; betas: each security's latest rolling liquidity beta "
        "against its planted return loading.",
    )


def _vw(column: str, weight: str = "weight") -> pl.Expr:
    """Weighted mean, added in security order (:mod:`liqpanel.core.stable`)."""
    ok = pl.col(column).is_finite() & pl.col(weight).is_finite() & (pl.col(weight) > 0)
    num = ordered_sum(pl.when(ok).then(pl.col(column) * pl.col(weight)))
    return (num / ordered_sum(pl.when(ok).then(pl.col(weight)))).alias(column)


def _acharya_pedersen(panel, settings, supplied, lags) -> tuple[list[ResultTable], pl.DataFrame]:
    illiq, size = settings.get("illiquidity", "amihud"), settings.get("size", "market_cap")
    sort_on, n = settings.get("sort_on") or illiq, settings.get("portfolios", 25)
    lags = settings.get("lags", lags)
    norm = ap.normalised_illiquidity(panel, illiq, size)
    market_c = norm.group_by("month").agg(_vw("illiq_norm"), _vw("illiq_trunc"), pl.col("market_ratio").first())
    market_c = ap.illiquidity_innovations(market_c.sort("month"))
    mkt, market_note = _market(panel, supplied, {k: settings[k] for k in ("market", "size") if k in settings})
    market_r = ap.return_innovations(mkt.select("month", pl.col("mkt").alias("ret")))
    market = market_c.select("month", "c_innovation").join(market_r.select("month", "r_innovation"), on="month")

    # portfolios formed at the end of t on sort_on; returns and illiquidity of t + 1 weighted by size at t
    if sort_on not in panel.columns:
        raise InputError(f"factors.acharya_pedersen: the panel has no column '{sort_on}' to sort on", column=sort_on)
    usable = panel.filter(pl.col(sort_on).is_finite() & pl.col(size).is_finite() & (pl.col(size) > 0))
    members = usable.select("security", "month", pl.col(size).alias("_size_t"), pl.col(sort_on)).with_columns(
        ap.rank_groups(usable, sort_on, n).alias("portfolio")
    )
    earned = members.select("security", pl.col("month").dt.offset_by("1mo"), "portfolio").join(
        norm, on=["security", "month"], how="inner"
    ).join(monthly_returns(panel), on=["security", "month"], how="left")
    port = earned.group_by("portfolio", "month").agg(
        _vw("ret"), _vw("illiq_norm"), _vw("illiq_trunc"), pl.col("market_ratio").first()
    ).sort("portfolio", "month")
    port = ap.illiquidity_innovations(port, by="portfolio")
    betas = ap.ap_betas(port, market)
    summary = port.group_by("portfolio").agg(
        ordered_mean(pl.col("ret"), "month").alias("mean_ret"),
        ordered_mean(pl.col("illiq_norm"), "month").alias("mean_illiq"),
    ).join(betas, on="portfolio", how="left").sort("portfolio")

    # Fama-MacBeth: next month's portfolio return on the portfolio's illiquidity at formation and its betas
    at_formation = members.join(norm.select("security", "month", "illiq_norm"), on=["security", "month"], how="inner")
    expected = at_formation.with_columns(pl.col("_size_t").alias("weight")).group_by("portfolio", "month").agg(
        _vw("illiq_norm")
    ).select("portfolio", "month", (pl.col("illiq_norm") / 100).alias("exp_illiq"))
    cs = expected.join(
        port.select("portfolio", pl.col("month").dt.offset_by("-1mo"), pl.col("ret").alias("ret_next")),
        on=["portfolio", "month"], how="inner",
    ).join(betas, on="portfolio", how="inner").with_columns(pl.col("portfolio").cast(pl.String).alias("security"))
    long, used_lags = ap.cross_section_tests(cs, lags)
    source = (f"{AP}: c = min(0.25 + 0.30 ILLIQ P_t-1, 30) in percent with ILLIQ the {illiq} column, P_t-1 the "
              f"market's capitalisation at t-1 over the first month's; AR(2) innovations; {market_note}.")
    tables = [
        ResultTable(
            "liquidity_adjusted_betas",
            summary,
            f"Liquidity-adjusted CAPM betas of {n} portfolios sorted on {sort_on}",
            f"{source} Portfolios formed each month by rank of {sort_on}, value-weighted by {size}; mean_ret: "
            "decimal per month; mean_illiq: percent; beta1 = cov(r_p, r_M)/D, beta2 = cov(c_p, c_M)/D, "
            "beta3 = cov(r_p, c_M)/D, beta4 = cov(c_p, r_M)/D, D = var(r_M - c_M) of the innovations (c in "
            "decimals); beta_net = beta1 + beta2 - beta3 - beta4.",
        ),
        ResultTable(
            "liquidity_adjusted_capm",
            long,
            "Fama-MacBeth regressions of portfolio returns on expected illiquidity and liquidity-adjusted betas",
            f"{source} Next month's portfolio return (decimal) on the portfolio's normalised illiquidity at "
            f"formation (exp_illiq, decimal) and its full-sample betas; Fama & MacBeth (1973) with Newey & West "
            f"(1987) standard errors, {used_lags} lags; r2 is the average cross-sectional R-squared.",
        ),
    ]
    market_series = market_c.select(
        "month", pl.col("illiq_norm").alias("illiq_market"), pl.col("c_innovation").alias("illiq_innovation")
    )
    return tables, market_series
