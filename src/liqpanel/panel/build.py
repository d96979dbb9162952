"""The panel stage: monthly measures + characteristics + next-month returns.

For each (security, month t) the panel holds the month-t measures, the
characteristics as they were public at the end of month t, and ``ret_next``,
the simple return of month t+1.

No look-ahead: a characteristics row dated d with a publication lag of L
months becomes usable from the month containing d plus L months (so
month-end market data, L = 0, is usable in its own month; annual accounts
with L = 6 are usable six months after the fiscal period ends). The merge is
an as-of join: each security-month takes the latest row already public.
"""

from __future__ import annotations

from typing import Any

import polars as pl

from liqpanel.core.contracts import check_unique_key, month_of
from liqpanel.core.errors import InputError
from liqpanel import ingest

KEY = ["security", "month"]


def with_delisting(returns: pl.LazyFrame) -> pl.LazyFrame:
    """Combine ``ret`` with an optional ``delist_ret`` column.

    When a delisting return is present the month's return is
    (1 + ret)(1 + delist_ret) - 1, or the delisting return alone when ``ret``
    is missing (common practice for delisted securities, e.g. Shumway 1997).
    """
    if "delist_ret" not in returns.collect_schema().names():
        return returns
    combined = (
        pl.when(pl.col("delist_ret").is_null()).then(pl.col("ret"))
        .when(pl.col("ret").is_null()).then(pl.col("delist_ret"))
        .otherwise((1.0 + pl.col("ret")) * (1.0 + pl.col("delist_ret")) - 1.0)
    )
    return returns.with_columns(combined.alias("ret")).drop("delist_ret")


def next_month_returns(returns: pl.LazyFrame) -> pl.LazyFrame:
    """``ret_next`` for month t from a monthly (security, month, ret) table."""
    return with_delisting(returns).select(
        "security",
        pl.col("month").dt.offset_by("-1mo").alias("month"),
        pl.col("ret").alias("ret_next"),
    )


def monthly_from_daily(daily: pl.LazyFrame) -> pl.LazyFrame:
    """Compound daily simple returns into monthly ones: prod(1 + r) - 1.

    A month with any missing daily return (other than a security's first
    day) still compounds the days it has; this is the convention of this
    project.
    """
    return daily.group_by("security", "month").agg(((pl.col("ret") + 1.0).product() - 1.0).alias("ret"))


def read_monthly_returns(layout: "ingest.Layout | str", mapping: dict[str, str] | None = None) -> pl.LazyFrame:
    """The monthly returns file (security, month, ret, optional delist_ret) through the input contract.

    ``month`` may be any day of the month (date, YYYY-MM-DD, YYYYMMDD) or
    YYYY-MM / YYYYMM; a return that is not finite becomes missing, and so
    shows in the panel's coverage table as a missing ``ret_next``.
    """
    if not isinstance(layout, ingest.Layout):
        layout = ingest.Layout(kind="returns", path=str(layout), mapping=dict(mapping or {}))
    spec = ingest.Spec("monthly returns file", months=("month",), numeric=("ret",), optional_numeric=("delist_ret",))
    return ingest.read_checked(layout, spec, key=("security", "month")).lazy()


def read_characteristics(entry: dict) -> pl.DataFrame:
    """One ``inputs.characteristics`` source: security, its date column and its variables as numbers.

    The entry's own ``columns:`` maps the user's names to ours and its
    ``format:`` says how dates and missing values are written
    (``liqpanel.ingest``); an integer date is YYYYMMDD, never a day count.
    Values that are not finite become missing (counted in the coverage table).
    A security with two rows on one date stops the run, naming the rows:
    which of the two holds would otherwise be a matter of row order.
    """
    layout = ingest.characteristics_layout(entry)
    date_column = entry.get("date_column", "date")
    spec = ingest.Spec(f"characteristics file '{entry['name']}'", dates=(date_column,), numeric=tuple(entry["variables"]),
                       flags_ok=True)
    return ingest.read_checked(layout, spec, key=("security", date_column))


def _public(source: pl.LazyFrame, *, lag_months: int, date_column: str, keep: list[str]) -> pl.LazyFrame:
    """Rows with a date and the month they become public; of a security's rows public in the same
    month, the latest-dated one (the others are superseded before anyone could use them)."""
    return (
        source.select(
            pl.col("security").cast(pl.String),
            month_of(pl.col(date_column)).dt.offset_by(f"{lag_months}mo").alias("public_month"),
            pl.col(date_column).alias("_dated"),
            *[pl.col(v) for v in keep],
        )
        .drop_nulls("public_month")
        .sort("security", "public_month", "_dated")
        .unique(["security", "public_month"], keep="last", maintain_order=True)
        .drop("_dated")
        .sort("public_month")
    )


def asof_characteristics(
    keys: pl.LazyFrame, source: pl.LazyFrame, *, variables: list[str], lag_months: int, date_column: str = "date"
) -> pl.LazyFrame:
    """Attach each key's latest characteristics already public in its month."""
    public = _public(source, lag_months=lag_months, date_column=date_column, keep=variables)
    return (
        keys.sort("month")
        .join_asof(
            public, left_on="month", right_on="public_month", by="security", strategy="backward", check_sortedness=False
        )
        .drop("public_month")
    )


def build_panel(
    monthly: pl.LazyFrame,
    *,
    returns: pl.LazyFrame,
    characteristics: list[dict[str, Any]] | None = None,
) -> pl.DataFrame:
    """Join measures, public characteristics and next-month returns.

    ``returns`` is a monthly (security, month, ret) table; ``characteristics``
    a list of dicts with ``frame`` (LazyFrame), ``variables``, ``lag_months``
    and ``date_column``.
    """
    panel = monthly
    for source in characteristics or []:
        names = source["frame"].collect_schema().names()
        for column in ["security", source.get("date_column", "date"), *source["variables"]]:
            if column not in names:
                raise InputError(
                    f"characteristics source '{source.get('name', '?')}' lacks column '{column}'",
                    path=source.get("path"),
                    column=column,
                )
        panel = asof_characteristics(
            panel,
            source["frame"],
            variables=source["variables"],
            lag_months=source.get("lag_months", 0),
            date_column=source.get("date_column", "date"),
        )
    panel = panel.join(next_month_returns(returns), on=KEY, how="left")
    out = panel.sort(KEY).collect()
    return check_unique_key(out, KEY, table="panel")


def check_overlap(securities: pl.Series, frame: pl.DataFrame, *, what: str, path: str | None, column: str) -> None:
    """Stop when no security of ``frame`` is among ``securities`` (the measures'): the identifiers differ.

    ``column`` is the user's name of the file's security column.
    """
    theirs = frame.get_column("security").cast(pl.String).drop_nulls().unique().sort()
    ours = securities.cast(pl.String).drop_nulls().unique().sort()
    if theirs.len() and ours.len() and not theirs.is_in(ours.implode()).any():
        raise InputError(
            f"no security of the {what} is among the {ours.len()} securities with measures: is column '{column}' "
            f"the same identifier? e.g. {theirs[0]!r} in the file, {ours[0]!r} in the measures",
            path=path, column=column,
        )


AUDIT_RULES = ("no_date", "same_month", "security_not_in_panel", "replaced_before_use", "after_last_month", "used")


def characteristics_audit(keys: pl.DataFrame, sources: list[dict[str, Any]]) -> pl.DataFrame:
    """Where every row of each characteristics source went: one row per source, a column per rule.

    Rules, in this order, each row counted once: ``no_date`` (no date:
    never public); ``same_month`` (a later-dated row of the security is public
    in the same month and holds); ``security_not_in_panel`` (no measure for the
    security); ``replaced_before_use`` (a later row became public before any of
    the security's panel months could take it, e.g. history before the
    sample); ``after_last_month`` (public after the security's last panel
    month); ``used`` (taken by at least one security-month). ``keys`` holds the
    panel's (security, month). Rows read = the sum of the rules, checked.
    """
    keys = keys.select(pl.col("security").cast(pl.String), "month")
    last = keys.group_by("security").agg(pl.col("month").max().alias("_last"))
    rows = []
    for source in sources:
        date_column, lag = source.get("date_column", "date"), source.get("lag_months", 0)
        frame = source["frame"].lazy().select(pl.col("security").cast(pl.String), date_column).collect()
        public = _public(frame.lazy(), lag_months=lag, date_column=date_column, keep=[]).collect()
        taken = (
            keys.sort("month").join_asof(public.with_columns(pl.col("public_month").alias("_taken")),
                                         left_on="month", right_on="public_month", by="security", strategy="backward",
                                         check_sortedness=False)
            .select("security", pl.col("_taken").alias("public_month")).drop_nulls().unique()
            .with_columns(pl.lit(True).alias("_used"))
        )
        fate = (
            public.join(taken, on=["security", "public_month"], how="left")
            .join(last, on="security", how="left")
            .select(
                pl.when(pl.col("_used")).then(pl.lit("used"))
                .when(pl.col("_last").is_null()).then(pl.lit("security_not_in_panel"))
                .when(pl.col("public_month") > pl.col("_last")).then(pl.lit("after_last_month"))
                .otherwise(pl.lit("replaced_before_use")).alias("rule")
            )
        )
        missing = frame.get_column(date_column).null_count()
        counts = {r: 0 for r in AUDIT_RULES}
        counts.update(dict(fate.group_by("rule").len().iter_rows()))
        counts["no_date"] = missing
        counts["same_month"] = frame.height - missing - public.height
        if sum(counts.values()) != frame.height:  # every row read has exactly one fate
            raise AssertionError(f"characteristics '{source.get('name')}': {frame.height} rows read, {counts} accounted")
        rows.append({"source": source.get("name", "?"), "read": frame.height, **counts})
    return pl.DataFrame(rows, schema={"source": pl.String, "read": pl.Int64, **{r: pl.Int64 for r in AUDIT_RULES}})


def audit_summary(audit: pl.DataFrame) -> pl.DataFrame:
    """``characteristics_audit`` in print: per source, rows read, used, and not used by rule, with shares of read."""
    unused = [r for r in AUDIT_RULES if r != "used"]
    long = audit.unpivot(["read", "used", *unused], index="source", variable_name="rows", value_name="count")
    order = {name: k for k, name in enumerate(["read", "used", *unused])}
    return (
        long.with_columns(
            (pl.col("count") / pl.col("count").filter(pl.col("rows") == "read").first().over("source")).alias("share"),
            pl.col("rows").replace_strict(order, return_dtype=pl.Int32).alias("_order"),
            pl.when(pl.col("rows").is_in(unused)).then(pl.lit("not used: ") + pl.col("rows")).otherwise("rows").alias("rows"),
        )
        .sort("source", "_order", maintain_order=True)
        .drop("_order")
    )


def transform_panel(panel: pl.DataFrame, transforms: dict[str, Any]) -> pl.DataFrame:
    """Per-month cross-sectional transforms named in the config, in this order.

    - ``log``: adds ``log_<name>`` = ln(x) for x > 0, missing otherwise;
    - ``winsorize``: clips each listed variable, month by month, to its
      ``lower`` and ``upper`` cross-sectional quantiles (linear
      interpolation; common practice, e.g. 1% and 99%);
    - ``standardize``: replaces each listed variable by its month-by-month
      z-score (x - mean) / sd (sample sd).
    """
    out = panel
    names = set(panel.columns)

    def _check(variables, what):
        for v in variables:
            if v not in names:
                raise InputError(f"`panel.{what}` names '{v}', which is not a panel column; columns: {sorted(names)}")

    logs = transforms.get("log") or []
    _check(logs, "log")
    out = out.with_columns(
        [pl.when(pl.col(v) > 0).then(pl.col(v).log()).otherwise(None).alias(f"log_{v}") for v in logs]
    )
    names |= {f"log_{v}" for v in logs}
    wins = transforms.get("winsorize") or {}
    variables = wins.get("variables") or []
    _check(variables, "winsorize")
    if variables:
        lo, hi = wins.get("lower", 0.01), wins.get("upper", 0.99)
        out = out.with_columns(
            [
                pl.col(v).clip(
                    pl.col(v).quantile(lo, "linear").over("month"), pl.col(v).quantile(hi, "linear").over("month")
                ).alias(v)
                for v in variables
            ]
        )
    std = transforms.get("standardize") or []
    _check(std, "standardize")
    out = out.with_columns(
        [((pl.col(v) - pl.col(v).mean().over("month")) / pl.col(v).std().over("month")).alias(v) for v in std]
    )
    return out


def coverage(panel: pl.DataFrame, variables: list[str]) -> pl.DataFrame:
    """Securities per month and the share of each variable that is missing (null, NaN or infinite)."""
    present = [v for v in variables if v in panel.columns]
    return (
        panel.group_by("month")
        .agg(
            pl.len().cast(pl.Int64).alias("securities"),
            *[(pl.col(v).is_null() | ~pl.col(v).is_finite()).mean().alias(f"missing_{v}") if panel.schema[v].is_float()
              else pl.col(v).is_null().mean().alias(f"missing_{v}") for v in present],
        )
        .sort("month")
    )
