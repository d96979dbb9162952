"""The words under the tables: sample, standard errors, sources, units, and the summaries of measures and audits."""

from __future__ import annotations

import math
from typing import Any

import polars as pl

from liqpanel.clean import RULES_OF


def sample_note(config: dict, monthly: pl.DataFrame) -> str:
    """``Sample: 40 securities, 2021-01 to 2022-12, 960 security-months.``"""
    n_sec = monthly.get_column("security").n_unique() if monthly.height else 0
    return (
        f"Sample: {n_sec} securities, {config['sample']['start']} to {config['sample']['end']}, "
        f"{monthly.height} security-months"
    )


_ESTIMATOR_WORDS = {
    "fama_macbeth": "Fama-MacBeth (1973) regressions",
    "pooled": "pooled OLS",
    "fixed_effects": "OLS with {effects} fixed effects",
    "driscoll_kraay": "OLS{with_effects}",
}


def _lags_words(lags: int | None) -> str:
    return "the Newey-West (1994) rule for the lag length" if lags is None else f"{lags} lags"


def _covariance_words(spec: Any) -> str:
    cov = spec.covariance
    if cov == "newey_west":
        return f"Newey-West (1987) standard errors of the average slope, {_lags_words(spec.lags)}"
    if cov == "plain":
        return "the standard error of the average slope"
    if cov == "clustered":
        return "standard errors clustered by " + " and ".join(spec.cluster)
    if cov == "robust":
        return "heteroskedasticity-robust (White 1980) standard errors"
    if cov == "bartlett":
        return f"Driscoll-Kraay (1998) standard errors, {_lags_words(spec.lags)}"
    return "conventional OLS standard errors"


def standard_errors_note(models: list[dict]) -> str:
    """How each regression's standard errors are computed, in words."""
    from liqpanel.models import ModelSpec

    described: dict[str, list[str]] = {}
    for entry in models:
        spec = ModelSpec.from_config(entry)
        effects = " and ".join(spec.effects)
        words = _ESTIMATOR_WORDS[spec.estimator].format(
            effects=effects or "no", with_effects=f" with {effects} fixed effects" if effects else ""
        )
        described.setdefault(f"{words} with {_covariance_words(spec)}", []).append(spec.name)
    if len(described) == 1:
        return f"t-statistics in parentheses. {next(iter(described))}"
    return "t-statistics in parentheses. " + "; ".join(f"{', '.join(names)}: {text}" for text, names in described.items())


def measure_sources(names: list[str]) -> str:
    """``Measures: roll_spread from Roll (1984), ...; amihud from Amihud (2002), ...``"""
    from liqpanel.measures import REGISTRY

    return "Measures: " + "; ".join(f"{n} from {REGISTRY[n].source}" for n in names) if names else ""


def currency_of(config: dict) -> str:
    """The currency named in the notes: ``report.currency``, else the reporting currency of several
    markets (``markets.reporting_currency``), else the market profile's, else 'currency units'."""
    own = (config.get("report") or {}).get("currency")
    if own:
        return own
    if config.get("markets"):
        return config["markets"]["reporting_currency"]
    try:
        from liqpanel.config import load_market

        return load_market(config["market"]).get("currency") or "currency units"
    except Exception:  # a profile given as a mapping or without a currency: say so plainly
        return "currency units"


def units_note(config: dict, measures: list[str]) -> str:
    """The units of the measures that ran, and the currency."""
    from liqpanel.measures import REGISTRY

    families = {REGISTRY[n].family for n in measures if n in REGISTRY}
    cur = currency_of(config)
    parts = []
    if families & {"spread", "impact"}:
        parts.append("spreads and price impact are fractions of the price (0.01 = 1%)")
    if "volatility" in families:
        parts.append("volatilities are daily, in decimals (realized variance: daily, squared)")
    if "amihud" in measures:
        scale = (config["measures"].get("amihud") or {}).get("scale", 1e6)
        words = {1e6: "million", 1e9: "billion", 1e3: "thousand"}.get(float(scale), f"{scale:g}")
        parts.append(f"Amihud illiquidity is the absolute daily return per {words} {cur} traded")
    if {"zero_return_share", "zero_return_share_traded"} & set(measures):
        parts.append("shares of zero-return days are fractions of the month's days")
    if config.get("markets"):
        parts.append(f"returns are decimal returns per month; prices in each market's own currency; dollar "
                     f"volume and market values in {cur}, {_conversion_note(config)}")
    else:
        parts.append(f"returns are decimal returns per month; prices and market values in {cur}")
    return "Units: " + "; ".join(parts)


def _conversion_note(config: dict) -> str:
    """Which markets' amounts were converted to the reporting currency, and at which rate."""
    from liqpanel.config import load_market

    spec = config["markets"]
    foreign = []
    for code, name in spec["profiles"].items():
        currency = load_market(str(name)).get("currency")
        if currency and str(currency) != str(spec["reporting_currency"]):
            foreign.append(f"{code} from {currency}")
    if not foreign:
        return "the currency of every market"
    return (f"converted ({', '.join(foreign)}) at the day's rate (daily amounts) and the month-end rate "
            "(market values)")


def measure_summary(monthly: pl.DataFrame, outputs: list[str]) -> pl.DataFrame:
    """Pooled distribution of each measure output over security-months."""
    rows = []
    for name in outputs:
        x = monthly.get_column(name).drop_nulls().drop_nans()
        rows.append(
            {
                "measure": name,
                "n": x.len(),
                "mean": x.mean(),
                "sd": x.std(),
                "p25": x.quantile(0.25, "linear"),
                "median": x.median(),
                "p75": x.quantile(0.75, "linear"),
                "missing_share": 1.0 - x.len() / monthly.height if monthly.height else None,
            }
        )
    return pl.DataFrame(rows, schema_overrides={"n": pl.Int64})


def audit_summary(audit: pl.DataFrame) -> pl.DataFrame:
    """Rows read, kept and dropped per rule of each table, over the whole sample."""
    if "table" not in audit.columns:
        audit = audit.with_columns(pl.lit("trades").alias("table"))
    tables = [t for t in RULES_OF if t in set(audit.get_column("table").to_list())]
    rows = []
    for table in tables:
        part = audit.filter(pl.col("table") == table)
        rules = [r for r in RULES_OF[table] if f"drop_{r}" in part.columns]
        totals = part.select(pl.col("rows_read", "rows_kept", *[f"drop_{r}" for r in rules]).sum())
        read = totals.item(0, "rows_read")
        entries = [("read", read), ("kept", totals.item(0, "rows_kept"))]
        entries += [(f"dropped: {r}", totals.item(0, f"drop_{r}")) for r in rules]
        if "kept_without_quote" in part.columns and part.get_column("kept_without_quote").is_not_null().any():
            entries.append(("kept without a quote", part.get_column("kept_without_quote").sum()))
        rows += [(table, label, int(count), count / read if read else None) for label, count in entries]
    return pl.DataFrame(
        {"table": [r[0] for r in rows], "rows": [r[1] for r in rows], "count": [r[2] for r in rows],
         "share": [r[3] for r in rows]},
        schema_overrides={"count": pl.Int64},
    )


def timestamp_notes(audit: pl.DataFrame) -> str:
    """How each table's timestamps were read, as stated in the audit."""
    if "timestamps" not in audit.columns:
        return ""
    pairs = audit.select("table", "timestamps").unique().drop_nulls().sort("table", "timestamps")
    return " ".join(f"Timestamps of the {t}: {n}." for t, n in pairs.iter_rows() if n)


def spread_against_truth(monthly: pl.DataFrame, truth: pl.DataFrame, measures: list[str]) -> pl.DataFrame:
    """Mean and median estimate against the true spread over security-months."""
    joined = monthly.join(truth.select("security", "month", "spread"), on=["security", "month"], how="inner").sort(
        "security", "month"
    )  # a join's row order is not fixed; the sums below must be
    rows = []
    for name in measures:
        both = joined.select(name, "spread").drop_nulls()
        err = both.get_column(name) - both.get_column("spread")
        rows.append(
            {
                "measure": name,
                "n": both.height,
                "mean_estimate": both.get_column(name).mean(),
                "mean_truth": both.get_column("spread").mean(),
                "mean_bias": err.mean(),
                "rmse": math.sqrt((err**2).mean()) if both.height else None,
                "correlation": both.select(pl.corr(name, "spread")).item() if both.height > 2 else None,
            }
        )
    return pl.DataFrame(rows, schema_overrides={"n": pl.Int64})
