"""Same rows in another order, same tables, to the last bit.

Floating-point sums depend on the order of their terms; polars fixes no row
order after joins and group-bys. The models stage and the report's summaries
must give bit-identical numbers whatever order the panel's rows come in.
The panel here is random numbers with the demo's column names: no value is
checked, only that it does not move.
"""

from pathlib import Path

import numpy as np
import polars as pl
import pytest
import yaml

from liqpanel import report as rep
from liqpanel.config import validate_config
from liqpanel.models.run import run_models
from liqpanel.core.stable import ordered_mean, ordered_sum

REPO = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def panel():
    rng = np.random.default_rng(7)
    n_sec, n_months = 40, 24
    months = pl.date_range(pl.date(2021, 1, 1), pl.date(2022, 12, 1), "1mo", eager=True)
    frame = pl.DataFrame(
        {
            "security": np.repeat([f"Q{i:03d}" for i in range(n_sec)], n_months),
            "market": np.repeat(["HBR" if i % 5 else "GUL" for i in range(n_sec)], n_months),  # as the demo's two
            "month": np.tile(months.to_numpy(), n_sec),
            "roll_spread": rng.uniform(0.002, 0.04, n_sec * n_months),
            "amihud": rng.lognormal(0, 1, n_sec * n_months),
            "market_cap": rng.lognormal(20, 1, n_sec * n_months),
            "book_to_market": rng.uniform(0.2, 2.0, n_sec * n_months),
            "past_ret_12m": rng.normal(0.05, 0.3, n_sec * n_months),
        }
    ).with_columns(pl.col("month").cast(pl.Date), pl.col("market_cap").log().alias("log_size"))
    return frame.with_columns((0.005 + 0.5 * pl.col("roll_spread") + pl.Series(rng.normal(0, 0.08, frame.height))).alias("ret_next"))


def _tables(panel: pl.DataFrame, models: dict) -> dict[str, pl.DataFrame]:
    out = run_models(panel, models, monthly=panel)
    tables = {t.name: t.frame for t in out.tables}
    tables["regressions_long"] = out.regressions_long
    tables["measures_summary"] = rep.measure_summary(panel.sort("security", "month"), ["roll_spread", "amihud"])
    truth = panel.select("security", "month", (pl.col("roll_spread") * 0.9).alias("spread"))
    tables["spread_vs_truth"] = rep.spread_against_truth(panel, truth.sample(fraction=1.0, shuffle=True, seed=1), ["roll_spread"])
    return tables


def test_models_and_summaries_do_not_depend_on_row_order(panel):
    models = validate_config(yaml.safe_load((REPO / "config" / "config.yaml").read_text()))["models"]
    first = _tables(panel, models)
    assert {"regressions", "sort_roll_terciles", "sort_size_then_roll", "liquidity_factor"} <= set(first)
    for seed in (1, 2, 3):
        again = _tables(panel.sample(fraction=1.0, shuffle=True, seed=seed), models)
        for name, table in first.items():
            assert table.equals(again[name]), f"{name} changed with the row order (seed {seed})"


def test_ordered_sum_adds_in_key_order():
    rng = np.random.default_rng(3)
    values = rng.normal(0, 1e6, 500) * rng.choice([1e-9, 1.0, 1e9], 500)
    keys = [f"k{i:04d}" for i in rng.permutation(500)]
    frame = pl.DataFrame({"security": keys, "x": values, "g": 0})
    got = frame.group_by("g").agg(ordered_sum(pl.col("x")).alias("s"), ordered_mean(pl.col("x")).alias("m"))
    in_order = [v for _, v in sorted(zip(keys, values))]
    expected = 0.0
    for v in in_order:  # Python adds left to right: the order the sum promises
        expected += v
    assert got.item(0, "s") == expected
    assert got.item(0, "m") == expected / 500
    empty = frame.head(0).group_by("g").agg(ordered_sum(pl.col("x")))
    assert empty.height == 0
    with_nulls = pl.DataFrame({"security": ["a", "b", "c"], "x": [1.5, None, 2.0], "g": 0})
    row = with_nulls.group_by("g").agg(ordered_sum(pl.col("x")).alias("s"), ordered_mean(pl.col("x")).alias("m")).row(0)
    assert row[1:] == (3.5, 1.75)
