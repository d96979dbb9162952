"""The single-pass measures stage: plans, shared quantities, slices, the market return.

Every daily measure is a ``Plan`` (per-day quantities summed per
security-month, then a monthly formula); the stage runs all selected plans in
one pass over the sorted table, in slices. These tests check the mechanism:
its results must not depend on which measures run together, on the slice
size or on the row order. The estimators themselves are checked against the
papers and reference libraries in their own test files, and all of them
against an independent pandas implementation in ``test_bench_measures``.
"""

from __future__ import annotations

import numpy as np
import polars as pl
import pytest
from polars.testing import assert_frame_equal

from bench.measures_data import write_panel
from liqpanel.core.contracts import DAILY
from liqpanel.measures import REGISTRY, compute_monthly, resolve_options
from liqpanel.measures import plan as plans
from liqpanel.measures.market import add_market_return

KEY = ["security", "month"]


@pytest.fixture(scope="module")
def daily() -> pl.DataFrame:
    """A small synthetic panel from the Roll (1984) model (``bench.measures_data``), with the market return."""
    import tempfile
    from pathlib import Path

    with tempfile.TemporaryDirectory() as folder:
        path = write_panel(Path(folder) / "daily.parquet", securities=15, years=0.75, seed=11)
        return add_market_return(pl.read_parquet(path).lazy()).collect()


def daily_measures() -> list[str]:
    columns = set(DAILY) | {"shares_out", "mkt_ret"}
    return [n for n, m in REGISTRY.items() if m.plan is not None and set(m.columns) <= columns]


def plan_of(name: str) -> plans.Plan:
    options = resolve_options(REGISTRY[name], None)
    options.pop("min_days")
    return REGISTRY[name].plan(**options)


def test_every_daily_measure_except_the_sampler_has_a_plan():
    columns = set(DAILY) | {"shares_out", "mkt_ret"}
    without = sorted(n for n, m in REGISTRY.items() if m.plan is None and set(m.columns) <= columns)
    # a Markov chain, likelihood fits, and a combination of other measures: not sums over days
    assert without == ["gibbs_spread", "lot_mixed", "lot_ysplit", "spread_blend"]
    assert len(daily_measures()) == 19


def test_slices_give_exactly_the_one_pass_result(daily, monkeypatch):
    names = {n: None for n in daily_measures()}
    whole = compute_monthly(daily.lazy(), names)
    monkeypatch.setattr(plans, "BLOCK_ROWS", 97)  # many slices, each cut at a month's first day
    assert len(plans._blocks(plans.prepare(daily))) > 10
    assert_frame_equal(compute_monthly(daily.lazy(), names), whole)


def test_measures_together_equal_each_measure_alone(daily):
    together = compute_monthly(daily.lazy(), {n: None for n in daily_measures()})
    for name in daily_measures():
        alone = compute_monthly(daily.lazy(), {name: None})
        assert_frame_equal(together.select(alone.columns), alone, check_exact=True)


def test_shared_quantities_are_computed_once():
    # The close-to-close variance needs the count, sum and sum of squares of
    # the log returns, which the Roll autocovariances also need.
    roll_only, _ = plans._distinct({"roll_spread": plan_of("roll_spread")}, "sums")
    both, names = plans._distinct({"roll_spread": plan_of("roll_spread"), "vol_close": plan_of("vol_close")}, "sums")
    assert len(roll_only) == len(both) == 7
    assert names["vol_close"]["sum_sq"] == names["roll_spread"]["sum_sq"]


def test_an_intermediate_column_defined_twice_differently_is_an_error():
    one = plans.Plan(sums={"s": pl.col("_x")}, monthly=(pl.col("s"),), steps=({"_x": pl.col("ret") * 2.0},))
    other = plans.Plan(sums={"s": pl.col("_x")}, monthly=(pl.col("s"),), steps=({"_x": pl.col("ret") * 3.0},))
    with pytest.raises(ValueError, match="'_x'"):
        plans._steps({"one": one, "other": other})
    assert plans._steps({"one": one, "again": one}) == [{"_x": one.steps[0]["_x"]}]


def test_segment_sums_equal_a_group_by(daily):
    # The stage's sums (numpy reduceat over each month's rows) against a
    # plain polars group-by of the same quantity.
    plan = plans.Plan(
        sums={"s": pl.col("ret").abs(), "n": pl.col("ret").is_not_null()},
        monthly=(pl.col("s"), pl.col("n")),
    )
    base, results = plans.evaluate(plans.prepare(daily), {"check": plan})
    got = pl.concat([base, results["check"]], how="horizontal")
    want = daily.group_by(KEY).agg(pl.col("ret").abs().sum().alias("s"), pl.col("ret").count().cast(pl.Float64).alias("n"),
                                   pl.len().cast(pl.Int64).alias("n_days")).sort(KEY)
    assert_frame_equal(got.select(*KEY, "n_days", "n"), want.select(*KEY, "n_days", "n"))
    np.testing.assert_allclose(got["s"].to_numpy(), want["s"].to_numpy(), rtol=1e-13)


def test_market_return_equals_a_pandas_group_mean_whatever_the_row_order(daily):
    table = daily.drop("mkt_ret")
    ours = add_market_return(table.lazy()).collect()
    shuffled = add_market_return(table.sample(fraction=1.0, shuffle=True, seed=3).lazy()).collect()
    prepared = add_market_return(plans.prepare(table).lazy()).collect()  # the stage's sorted path
    frame = table.to_pandas()
    reference = frame.groupby("date")["ret"].mean()  # equal weights over rows with a return (pandas skips NaN)
    want = frame["date"].map(reference).to_numpy(dtype=float)
    np.testing.assert_allclose(ours["mkt_ret"].to_numpy().astype(float), want, rtol=1e-12, equal_nan=True)
    # The day's sum runs in security order on every path: identical digits.
    by_key = ours.select("security", "date", "mkt_ret").sort("security", "date")
    assert_frame_equal(shuffled.select("security", "date", "mkt_ret").sort("security", "date"), by_key)
    assert_frame_equal(prepared.select("security", "date", "mkt_ret"), by_key)


def test_an_empty_table_gives_no_months(daily):
    out = compute_monthly(daily.clear().lazy(), {n: None for n in daily_measures()})
    assert out.height == 0
    assert out.columns[:3] == ["security", "month", "n_days"]
    full = compute_monthly(daily.lazy(), {n: None for n in daily_measures()})
    assert out.schema == full.schema  # the same columns and types as a table with rows
