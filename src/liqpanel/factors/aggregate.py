"""Market-wide liquidity and its innovations (Pastor & Stambaugh 2003).

From each security's monthly return-reversal gamma (``ps_gamma``, see
:mod:`liqpanel.measures.impact`) the market's liquidity level, its scaled
change and the innovation series ``L_t`` that the liquidity betas and the
traded factor rest on. Formulas as recalled from Pastor & Stambaugh (2003,
section 1; from memory):

* ``Delta gamma_t = (m_t / m_1) * (1/N_t) * sum_i (gamma_i,t - gamma_i,t-1)``
  over the ``N_t`` securities with a gamma in both month ``t`` and month
  ``t - 1``; ``m_t`` is the total market value, at the end of month
  ``t - 1``, of those securities and ``m_1`` the same total in the first
  month of the series (the paper's August 1962);
* the level ``gamma_t = (m_t / m_1) * (1/N_t) * sum_i gamma_i,t`` over the
  same securities;
* ``Delta gamma_t = a + b * Delta gamma_t-1 + c * (m_t-1 / m_1) * gammabar_t-1 + u_t``
  by OLS, ``gammabar_t-1`` the unscaled cross-sectional mean of month
  ``t - 1`` (so ``(m_t-1/m_1) gammabar_t-1`` is the level of ``t - 1``);
* the innovation ``L_t = u_t / 100`` (the paper's scaling, from memory).

Units: ``ps_gamma`` is return per unit of signed dollar volume in the unit
the measure was run with (millions by default), so the level and change are
in that unit; the innovation is that divided by 100. Assumptions: the
cross-section in months ``t`` and ``t - 1`` overlaps; without a market-value
column the scaling is 1 throughout (the unscaled series; say so in notes).
"""

from __future__ import annotations

import numpy as np
import polars as pl

from liqpanel.core.errors import InputError
from liqpanel.core.stable import ordered_mean, ordered_sum

INNOVATION_SCALE = 100.0  # Pastor & Stambaugh (2003): L_t = u_t / 100 (from memory)


def aggregate_liquidity(
    panel: pl.DataFrame, gamma: str = "ps_gamma", size: str | None = "market_cap"
) -> pl.DataFrame:
    """The market's liquidity per month: ``month``, ``n_securities``, ``mean_gamma``,
    ``scale`` (m_t/m_1), ``level`` and ``change`` (formulas in the module docstring).

    ``panel`` holds one row per security and month with ``gamma`` and (when
    ``size`` is given) the market value ``size`` at the end of that month;
    month ``t``'s weight ``m_t`` sums the securities' market values of month
    ``t - 1``. A security enters month ``t`` only if it has a finite gamma in
    ``t`` and in the calendar month before (and, with ``size``, a positive
    market value at the end of ``t - 1``). Months without any such security
    have no row.
    """
    for column in ("security", "month", gamma, *([size] if size else [])):
        if column not in panel.columns:
            raise InputError(f"aggregate liquidity needs a panel column '{column}', the panel has {panel.columns}",
                             column=column)
    prev = panel.select(
        "security",
        pl.col("month").dt.offset_by("1mo").alias("month"),
        pl.col(gamma).alias("_gamma_prev"),
        (pl.col(size) if size else pl.lit(1.0)).cast(pl.Float64).alias("_size_prev"),
    )
    both = (
        panel.select("security", "month", pl.col(gamma).cast(pl.Float64).alias("_gamma"))
        .join(prev, on=["security", "month"], how="inner")
        .filter(
            pl.col("_gamma").is_finite() & pl.col("_gamma_prev").is_finite()
            & pl.col("_size_prev").is_finite() & (pl.col("_size_prev") > 0)
        )
    )
    by_month = (
        both.group_by("month")
        .agg(
            pl.len().alias("n_securities"),
            ordered_mean(pl.col("_gamma")).alias("mean_gamma"),
            ordered_mean(pl.col("_gamma") - pl.col("_gamma_prev")).alias("_mean_change"),
            ordered_sum(pl.col("_size_prev")).alias("_m"),
        )
        .sort("month")
    )
    scale = pl.col("_m") / pl.col("_m").first()
    return by_month.select(
        "month",
        pl.col("n_securities").cast(pl.Int64),
        "mean_gamma",
        scale.alias("scale"),
        (scale * pl.col("mean_gamma")).alias("level"),
        (scale * pl.col("_mean_change")).alias("change"),
    )


def liquidity_innovations(aggregate: pl.DataFrame) -> pl.DataFrame:
    """Add the AR regression's fitted residual ``u`` and the innovation ``innovation`` = u / 100.

    ``aggregate`` as from :func:`aggregate_liquidity`. Regression (OLS, one
    fit over the sample): ``change_t = a + b change_t-1 + c level_t-1 + u_t``
    where ``t - 1`` is the calendar month before ``t`` (a month whose
    predecessor is missing gets no innovation). Returns the frame with
    ``u`` and ``innovation`` (missing where not estimable); the coefficients
    are :func:`innovation_coefficients`.
    """
    design = _design(aggregate)
    coef = innovation_coefficients(aggregate)
    fitted = coef[0] + coef[1] * pl.col("_change_lag") + coef[2] * pl.col("_level_lag")
    return design.with_columns((pl.col("change") - fitted).alias("u")).with_columns(
        (pl.col("u") / INNOVATION_SCALE).alias("innovation")
    ).drop("_change_lag", "_level_lag")


def _design(aggregate: pl.DataFrame) -> pl.DataFrame:
    lagged = aggregate.select(
        pl.col("month").dt.offset_by("1mo"), pl.col("change").alias("_change_lag"), pl.col("level").alias("_level_lag")
    )
    return aggregate.sort("month").join(lagged, on="month", how="left")


def innovation_coefficients(aggregate: pl.DataFrame) -> np.ndarray:
    """OLS coefficients ``(a, b, c)`` of the AR regression of :func:`liquidity_innovations`."""
    design = _design(aggregate).drop_nulls(["change", "_change_lag", "_level_lag"])
    if design.height < 4:
        raise InputError(
            f"the market liquidity series has {design.height} months with a change and its lags; "
            "the AR regression needs at least 4"
        )
    x = np.column_stack([np.ones(design.height), design.get_column("_change_lag").to_numpy(),
                         design.get_column("_level_lag").to_numpy()])
    coef, *_ = np.linalg.lstsq(x, design.get_column("change").to_numpy(), rcond=None)
    return coef
