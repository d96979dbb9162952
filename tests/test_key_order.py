"""The one-pass order check (``liqpanel.core.contracts.follows_previous``) against a sort.

A table is in strict key order exactly when sorting it by its key changes
nothing and no key repeats (common practice); the check must say the same
on random tables, without sorting.
"""

from __future__ import annotations

import numpy as np
import polars as pl
import pytest

from liqpanel.core.contracts import follows_previous


def in_order_by_sorting(frame: pl.DataFrame, keys: list[str]) -> bool:
    rows = list(frame.select(keys).iter_rows())
    return all(a < b for a, b in zip(rows, rows[1:]))


@pytest.mark.parametrize("seed", range(40))
def test_the_check_agrees_with_sorting(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(0, 12))
    frame = pl.DataFrame({"security": rng.choice(["sim-a", "sim-b", "sim-c"], n).tolist(),
                          "day": rng.integers(0, 4, n).tolist()})
    if seed % 2:  # half of them sorted (some with repeated keys), so both answers occur
        frame = frame.sort("security", "day")
    checked = frame.select(follows_previous(["security", "day"]).slice(1).all()).item()
    assert checked == in_order_by_sorting(frame, ["security", "day"])


def test_ties_on_the_first_key_are_broken_by_the_next():
    frame = pl.DataFrame({"security": ["sim-a", "sim-a", "sim-b"], "day": [2, 1, 0]})
    assert frame.select(follows_previous(["security", "day"])).to_series().to_list() == [None, False, True]
