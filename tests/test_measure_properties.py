"""Properties every measure of the estimator library keeps, checked with hypothesis.

- Proportional spreads and volatilities do not change when every price is
  multiplied by the same constant (they are defined on log prices or returns;
  common practice: a spread "as a share of the price").
- The order of the rows and of the securities changes nothing.
- Missing days (absent rows) never raise; the output has one row per
  (security, month) of the input, the output contract's types, and a reason
  exactly where the value is missing.
"""

from __future__ import annotations

import numpy as np
import polars as pl
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from liqpanel.core.contracts import month_of
from liqpanel.measures.library import MEASURES
from liqpanel.measures.market import add_market_return

KEY = ["security", "month"]
FAST = {"gibbs_spread": {"sweeps": 40, "burn": 10}, "lot_mixed": {"max_iterations": 30}, "lot_ysplit": {"max_iterations": 30}}
PRICE_FREE = {m.name for m in MEASURES if m.family in ("spread", "volatility")}
SETTINGS = settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def run(measure, daily: pl.DataFrame) -> pl.DataFrame:
    options = {**measure.options, **FAST.get(measure.name, {})}
    return measure.function(daily.lazy(), **options).collect()


def assert_same_values(base: pl.DataFrame, other: pl.DataFrame, measure, rtol: float) -> None:
    """Same keys, counts and reasons; values equal up to floating-point rounding.

    Row order changes the order of floating-point operations (and polars'
    kernels may round the last bit differently), so values are compared with a
    tolerance; square roots near zero (spreads, volatilities) get an absolute
    tolerance of 1e-7, and the Pastor-Stambaugh regression, whose solution
    amplifies rounding by the regressors' condition number (up to 1e8 before a
    month counts as collinear), a relative one of 1e-6.
    """
    assert base.select(KEY, "n_obs", "reason").equals(other.select(KEY, "n_obs", "reason")), measure.name
    tolerance = 1e-6 if measure.name == "ps_gamma" else rtol
    for column in measure.outputs:
        np.testing.assert_allclose(
            other[column].to_numpy().astype(float), base[column].to_numpy().astype(float),
            rtol=tolerance, atol=1e-7, equal_nan=True, err_msg=f"{measure.name}.{column}",
        )


@st.composite
def daily_tables(draw):
    """A small daily table in cents-rounded prices spanning a month boundary, with days removed."""
    n_securities = draw(st.integers(1, 3))
    n_days = draw(st.integers(1, 30))
    seed = draw(st.integers(0, 2**31 - 1))
    tick = draw(st.sampled_from([1, 5, 50]))  # price step in cents; 50 makes many ties
    keep = draw(st.lists(st.booleans(), min_size=n_securities * n_days, max_size=n_securities * n_days))
    rng = np.random.default_rng(seed)
    dates = np.busday_offset("2021-01-18", np.arange(n_days), roll="forward").astype(object)  # datetime.date
    rows = []
    for s in range(n_securities):
        close = 2000
        for d in range(n_days):
            open_ = max(tick, close + tick * int(rng.integers(-2, 3)))
            close = max(tick, close + tick * int(rng.integers(-3, 4)))
            high = max(open_, close) + tick * int(rng.integers(0, 3))
            low = max(tick, min(open_, close) - tick * int(rng.integers(0, 3)))
            volume = float(100 * rng.integers(0, 50))
            if keep[s * n_days + d]:
                rows.append((f"SEC{s}", dates[d], open_ / 100, high / 100, low / 100, close / 100, volume))
    frame = pl.DataFrame(
        rows,
        schema={"security": pl.String, "date": pl.Date, "open": pl.Float64, "high": pl.Float64,
                "low": pl.Float64, "close": pl.Float64, "volume": pl.Float64},
        orient="row",
    )
    frame = frame.sort("security", "date").with_columns(
        month_of("date").alias("month"),
        (pl.col("close") / pl.col("close").shift(1).over("security") - 1.0).alias("ret"),
        (pl.col("volume") * pl.col("close")).alias("dollar_volume"),
        pl.col("volume").cast(pl.Int64).alias("n_trades"),
        pl.lit(1e6).alias("shares_out"),
        (pl.col("close") - tick / 200).alias("close_bid"),  # a closing quote half a price step either side
        (pl.col("close") + tick / 200).alias("close_ask"),
        (pl.col("close") == pl.col("high")).alias("limit_day"),  # a daily flag for the limit-day counts
    )
    return add_market_return(frame.lazy()).collect()


def scale_prices(frame: pl.DataFrame, factor: float) -> pl.DataFrame:
    return frame.with_columns(pl.col("open", "high", "low", "close", "close_bid", "close_ask") * factor)


@SETTINGS
@given(daily=daily_tables(), factor=st.sampled_from([0.01, 3.7, 1000.0]))
def test_price_scale_leaves_spreads_and_volatilities_unchanged(daily, factor):
    scaled = scale_prices(daily, factor)
    for measure in MEASURES:
        if measure.name in PRICE_FREE:
            assert_same_values(run(measure, daily), run(measure, scaled), measure, rtol=1e-9)


@SETTINGS
@given(daily=daily_tables(), seed=st.integers(0, 1000))
def test_row_and_security_order_changes_nothing(daily, seed):
    shuffled = daily.sample(fraction=1.0, shuffle=True, seed=seed)
    for measure in MEASURES:
        assert_same_values(run(measure, daily), run(measure, shuffled), measure, rtol=1e-12)
    market = add_market_return(daily.drop("mkt_ret").lazy(), weighting="value").collect()
    market_shuffled = add_market_return(shuffled.drop("mkt_ret").lazy(), weighting="value").collect()
    np.testing.assert_allclose(
        market_shuffled.sort("security", "date")["mkt_ret"].to_numpy().astype(float),
        market["mkt_ret"].to_numpy().astype(float), rtol=1e-12, atol=1e-15, equal_nan=True,
    )


@SETTINGS
@given(daily=daily_tables())
def test_missing_days_never_raise_and_the_contract_holds(daily):
    keys = daily.select(KEY).unique().sort(KEY)
    rows = daily.group_by(KEY).len()
    market_days = daily.select("date", "month").unique().group_by("month").len().rename({"len": "market_days"})
    for measure in MEASURES:
        out = run(measure, daily)
        assert out.columns == [*KEY, *measure.outputs, "n_obs", "reason"], measure.name
        assert out.select(KEY).equals(keys), measure.name
        assert all(out[c].dtype == pl.Float64 for c in measure.outputs), measure.name
        assert out["n_obs"].dtype == pl.Int64 and out["reason"].dtype == pl.String, measure.name
        checked = out.join(rows, on=KEY).join(market_days, on="month")
        # Zero-return shares, FHT and Liu count the market's days (days without a trade included).
        on_calendar = measure.name.startswith("zero_return") or measure.name in ("fht_spread", "liu_lm")
        limit = "market_days" if on_calendar else "len"
        assert (checked["n_obs"] <= checked[limit]).all(), measure.name
        first = pl.col(measure.outputs[0])
        assert out.filter(first.is_null() != pl.col("reason").is_not_null()).height == 0, measure.name
        for column in measure.outputs:
            values = out[column].drop_nulls().to_numpy()
            assert np.isfinite(values).all(), f"{measure.name}.{column}"


def test_empty_table_gives_empty_output():
    empty = pl.DataFrame(
        schema={"security": pl.String, "date": pl.Date, "month": pl.Date, "open": pl.Float64, "high": pl.Float64,
                "low": pl.Float64, "close": pl.Float64, "volume": pl.Float64, "dollar_volume": pl.Float64,
                "n_trades": pl.Int64, "ret": pl.Float64, "shares_out": pl.Float64, "mkt_ret": pl.Float64,
                "close_bid": pl.Float64, "close_ask": pl.Float64, "limit_day": pl.Boolean}
    )
    for measure in MEASURES:
        out = run(measure, empty)
        assert out.height == 0, measure.name
        assert out.columns == [*KEY, *measure.outputs, "n_obs", "reason"], measure.name


def test_registry_entries():
    from liqpanel.measures import REGISTRY

    names = [m.name for m in MEASURES]
    assert len(names) == len(set(names))
    for measure in MEASURES:
        assert REGISTRY[measure.name] is measure
        assert measure.family in ("spread", "volatility", "impact", "activity")
        assert measure.source and measure.description
    assert REGISTRY["ps_gamma"].min_days == 15  # Pastor & Stambaugh (2003): at least 15 observations
