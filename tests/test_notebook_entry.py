"""liqpanel.measures.compute: a pandas or polars daily frame in, the monthly table with diagnostics out."""

import numpy as np
import pandas as pd
import polars as pl
import pytest
from polars.testing import assert_frame_equal

from liqpanel.bars import daily_bars
from liqpanel.measures import compute, compute_monthly
from liqpanel.simulate import simulate_security_months


@pytest.fixture(scope="module")
def daily() -> pl.DataFrame:
    market = simulate_security_months(np.array([0.002, 0.004]), 0.02, 50.0, n_days=42, seed=4, tick=0.01)
    return daily_bars(market.trades.lazy(), timezone="America/New_York").collect().with_columns(pl.lit(1e7).alias("shares_out"))


def test_pandas_and_polars_give_the_stage_s_numbers(daily):
    names = ["roll_spread", "fht_spread", "amivest", "effective_tick", "liu_lm", "cs_spread"]
    from_polars = compute(daily, names, tick_size=0.01)
    stage = compute_monthly(daily.lazy(), {n: ({"tick_size": 0.01} if n == "effective_tick" else None) for n in names})
    assert_frame_equal(from_polars.select(stage.columns), stage)
    assert "liu_lm12" in from_polars.columns  # Liu (2006) LM12 over twelve months: null on two months of data
    from_pandas = compute(daily.to_pandas(), names, tick_size=0.01)
    assert isinstance(from_pandas, pd.DataFrame)
    np.testing.assert_allclose(from_pandas["fht_spread"].to_numpy(float), from_polars["fht_spread"].to_numpy(), rtol=1e-12)
    np.testing.assert_allclose(from_pandas["effective_tick"].to_numpy(float), from_polars["effective_tick"].to_numpy(),
                               rtol=1e-12)
    assert from_pandas["effective_tick"].notna().sum() == 4  # two securities, two full months


def test_a_bare_pandas_frame_gets_month_return_and_dollar_volume(daily):
    # only security, date (as text), OHLC and volume: the rest is derived as in the daily file reader
    bare = daily.select("security", pl.col("date").cast(pl.String), "open", "high", "low", "close", "volume").to_pandas()
    out = compute(bare)
    full = compute(daily.drop("shares_out"))
    assert "amihud" in out.columns and "edge_spread" in out.columns and "gibbs_spread" not in out.columns
    # the first day of each security has no return here (no earlier close), unlike the bars' own ret
    assert out["edge_spread"].notna().sum() == 4  # two securities, two full months (the third has one day)
    np.testing.assert_allclose(out["cs_spread"].to_numpy(float), full["cs_spread"].to_numpy(), rtol=1e-12)


def test_a_frame_without_dates_is_refused_by_name():
    with pytest.raises(Exception, match="date"):
        compute(pd.DataFrame({"security": ["A"], "close": [1.0]}))
