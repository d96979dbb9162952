"""Amihud (2002) illiquidity and the Amivest liquidity ratio."""

from __future__ import annotations

import polars as pl

from liqpanel.core.errors import ConfigError
from liqpanel.measures.plan import Plan, missing_reason, run_plan


def amihud_illiquidity(daily: pl.LazyFrame, *, scale: float = 1e6, **_) -> pl.LazyFrame:
    """Amihud (2002) illiquidity: ILLIQ = mean_t |r_t| / DV_t.

    The mean runs over the month's days with positive dollar volume and a
    return; DV is the day's dollar volume in the market's currency. The value
    is multiplied by ``scale`` (default 10^6: price change per million units
    of currency traded).

    Outputs: ``amihud``, ``n_obs`` (days used), ``reason`` ("zero_volume" when
    no day has positive dollar volume).
    """
    return run_plan(daily, amihud_plan(scale=scale))


def amihud_plan(*, scale: float = 1e6, **_) -> Plan:
    """The plan of ``amihud_illiquidity``."""
    valid = (pl.col("dollar_volume") > 0) & pl.col("ret").is_not_null()
    n = pl.col("n")
    return Plan(
        sums={"sum": pl.when(valid).then(pl.col("ret").abs() / pl.col("dollar_volume")), "n": valid},
        monthly=(
            pl.when(n > 0).then(pl.col("sum") / n * scale).alias("amihud"),
            n.cast(pl.Int64).alias("n_obs"),
            missing_reason(n == 0, "zero_volume"),
        ),
    )


AMIVEST_FORMS = ("mean_of_ratios", "ratio_of_sums")


def amivest_plan(*, form: str = "mean_of_ratios", unit: float = 1e6, **_) -> Plan:
    """The plan of ``amivest_liquidity``."""
    if form not in AMIVEST_FORMS:
        raise ConfigError(f"measure 'amivest': option `form` must be one of {AMIVEST_FORMS}, got {form!r}")
    if not unit > 0:
        raise ConfigError(f"measure 'amivest': option `unit` must be positive, got {unit}")
    ret, volume = pl.col("ret"), pl.col("dollar_volume")
    valid = (volume > 0) & ret.is_not_null() & (ret != 0)
    n = pl.col("n")
    value = pl.col("ratio") / n if form == "mean_of_ratios" else pl.col("volume") / pl.col("moves")
    return Plan(
        sums={
            "n": valid,
            "ratio": pl.when(valid).then(volume / ret.abs()),
            "volume": pl.when(valid).then(volume),
            "moves": pl.when(valid).then(ret.abs()),
        },
        monthly=(
            pl.when(n > 0).then(value / unit).alias("amivest"),
            n.cast(pl.Int64).alias("n_obs"),
            missing_reason(n == 0, "no_price_moves"),
        ),
    )


def amivest_liquidity(daily: pl.LazyFrame, *, form: str = "mean_of_ratios", unit: float = 1e6, **_) -> pl.LazyFrame:
    """Amivest liquidity ratio: dollar volume per unit of absolute return.

    Formula (``form="mean_of_ratios"``, default, the form of Goyenko, Holden
    & Trzcinka 2009, from memory): L = mean_t DV_t / |r_t| over the month's
    days with a non-zero return and positive dollar volume;
    ``"ratio_of_sums"``: L = sum_t DV_t / sum_t |r_t| over the same days
    (Amihud, Mendelson & Lauterbach 1997, from memory). DV is divided by
    ``unit`` (default 10^6: millions of the market's currency per 100% price
    move). Higher is more liquid; with a constant |r_t| / DV_t the ratio is
    the reciprocal of the Amihud (2002) illiquidity in the same units.

    Assumption: the volume a security absorbs per unit of price move
    measures market depth. Outputs ``amivest``; ``n_obs`` days used;
    ``reason`` "no_price_moves" when no day qualifies.

    Sources: Cooper, S. K., Groth, J. C. & Avera, W. E. (1985), "Liquidity,
    exchange listing, and common stock performance", Journal of Economics
    and Business 37(1), 19-33; Amihud, Mendelson & Lauterbach (1997),
    Journal of Financial Economics 45(3); Goyenko, Holden & Trzcinka (2009),
    Journal of Financial Economics 92(2).
    """
    return run_plan(daily, amivest_plan(form=form, unit=unit))
