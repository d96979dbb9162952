"""Liu (2006) turnover-adjusted number of zero-volume days: LM1 per month and LM12 over twelve months."""

from __future__ import annotations

import polars as pl

from liqpanel.core.errors import ConfigError
from liqpanel.measures.plan import Plan, run_plan
from liqpanel.measures.zeros import no_trade_days

LM1_DEFLATOR = 11_000.0  # Liu (2006) for LM1 (from memory)
LM12_DEFLATOR = 480_000.0  # Liu (2006) for LM6 and LM12 (from memory)
DAYS_PER_MONTH = 21  # Liu (2006): the count is standardised to 21 trading days a month


def _check_deflator(deflator: float) -> None:
    if not deflator > 0:
        raise ConfigError(f"measure 'liu_lm': option `deflator` must be positive, got {deflator}")


def liu_formula(zero_days: pl.Expr, turnover: pl.Expr, market_days: pl.Expr, months: int, deflator: float) -> pl.Expr:
    """LMx = [zero-volume days + (1 / turnover) / deflator] x 21 x / trading days (Liu 2006)."""
    return (zero_days + (1.0 / turnover) / deflator) * (DAYS_PER_MONTH * months) / market_days


def liu_plan(*, deflator: float = LM1_DEFLATOR, calendar: str = "market", **_) -> Plan:
    """The plan of ``liu_lm``."""
    _check_deflator(deflator)
    volume, shares = pl.col("volume"), pl.col("shares_out")
    zero_days = pl.col("zero_rows") + no_trade_days(calendar, "liu_lm")
    days = pl.col("market_days") if calendar == "market" else pl.col("n_days")
    turnover = pl.col("turnover")
    no_turnover = pl.col("n_turnover") == 0
    return Plan(
        sums={
            "zero_rows": volume == 0,
            "turnover": pl.when(shares > 0).then(volume / shares),
            "n_turnover": (shares > 0) & volume.is_not_null(),
        },
        monthly=(
            pl.when(no_turnover | (turnover <= 0)).then(None)
            .otherwise(liu_formula(zero_days, turnover, days, 1, deflator)).alias("liu_lm1"),
            zero_days.cast(pl.Float64).alias("liu_zero_days"),
            pl.when(no_turnover).then(None).otherwise(turnover).alias("liu_turnover"),
            days.cast(pl.Float64).alias("liu_days"),
            days.cast(pl.Int64).alias("n_obs"),
            pl.when(no_turnover).then(pl.lit("no_shares_out"))
            .when(turnover <= 0).then(pl.lit("no_volume"))
            .otherwise(None).cast(pl.String).alias("reason"),
        ),
        context=("market_days",) if calendar == "market" else (),
    )


def liu_lm(daily: pl.LazyFrame, *, deflator: float = LM1_DEFLATOR, calendar: str = "market") -> pl.LazyFrame:
    """Liu (2006) LM1: the month's standardised turnover-adjusted number of zero-volume days.

    Formula: LM1 = [NoZV + (1 / TO) / deflator] x 21 / NoTD, where NoZV is
    the number of the month's trading days with zero volume (rows with
    volume 0 and, with ``calendar="market"``, the market's trading days in
    the security's listed span without a row), TO the month's turnover as
    the sum of daily volume / shares outstanding, NoTD the number of the
    market's trading days (in the listed span) and ``deflator`` a constant
    that keeps (1 / TO) / deflator between 0 and 1 so that it only breaks
    ties between securities with the same number of zero-volume days (11,000
    for LM1 in Liu 2006, from memory). Units: days (standardised to a
    21-day month); higher is less liquid.

    The component columns ``liu_zero_days``, ``liu_turnover`` and
    ``liu_days`` are outputs too: ``liu_lm12`` sums them over twelve months
    after the monthly table is assembled (the measures stage computes each
    month on its own).

    Outputs ``liu_lm1``, the components; ``n_obs`` trading days; ``reason``
    "no_shares_out" (no positive shares outstanding) or "no_volume" (TO = 0).

    Source: Liu, W. (2006), "A liquidity-augmented capital asset pricing
    model", Journal of Financial Economics 82(3), 631-671 (formula and
    deflators from memory).
    """
    return run_plan(daily, liu_plan(deflator=deflator, calendar=calendar))


def liu_lm12(monthly: pl.DataFrame | pl.LazyFrame, *, months: int = 12, deflator: float = LM12_DEFLATOR) -> pl.DataFrame:
    """Liu (2006) LM12 (or LMx for ``months``) from the monthly components of ``liu_lm``, one row per security-month.

    LMx at month t = [sum of NoZV + (1 / sum of TO) / deflator] x 21 x / sum
    of NoTD over months t - x + 1 .. t (calendar months). Missing (null)
    unless all x months have the components; deflator 480,000 for LM12 (Liu
    2006, from memory). Returns ``security``, ``month``, ``liu_lm<x>``
    sorted by key.
    """
    _check_deflator(deflator)
    if months < 1:
        raise ConfigError(f"liu_lm12: `months` must be positive, got {months}")
    frame = monthly.lazy() if isinstance(monthly, pl.DataFrame) else monthly
    parts = ("liu_zero_days", "liu_turnover", "liu_days")
    index = (pl.col("month").dt.year() * 12 + pl.col("month").dt.month()).alias("_index")
    base = frame.select("security", "month", index, *parts).sort("security", "month").collect(engine="in-memory")
    rolled = base.rolling("_index", period=f"{months}i", group_by="security").agg(
        *[pl.col(p).sum().alias(p) for p in parts],
        pl.col("liu_turnover").is_not_null().sum().alias("_complete"),
        pl.col("_index").min().alias("_first"),
    )
    complete = (pl.col("_complete") == months) & (pl.col("_index") - pl.col("_first") == months - 1)
    value = liu_formula(pl.col("liu_zero_days"), pl.col("liu_turnover"), pl.col("liu_days"), months, deflator)
    return (
        base.select("security", "month", "_index")
        .join(rolled, on=["security", "_index"], how="left", maintain_order="left")
        .select("security", "month",
                pl.when(complete & (pl.col("liu_turnover") > 0)).then(value).otherwise(None).alias(f"liu_lm{months}"))
        .sort("security", "month")
    )


__all__ = ["LM12_DEFLATOR", "LM1_DEFLATOR", "liu_formula", "liu_lm", "liu_lm12", "liu_plan"]
