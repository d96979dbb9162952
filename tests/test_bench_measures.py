"""The measures benchmark runs, and both its baselines compute the same measures as the library.

The benchmark's timings are not checked here (speed targets live in
``bench/``); these tests keep its code from rotting on a size that runs in
seconds. The naive baseline is an independent implementation of every daily
measure in pandas and numpy (``np.linalg.lstsq`` for the Pastor & Stambaugh
regression), written from the formulas in each measure's docstring, so its
agreement with ``compute_monthly`` is also a cross-check of the library.
The vectorised baseline is a third implementation, whole-column pandas
(``groupby`` shift, aggregate and transform, no ``apply``), held to the same
numbers.
"""

from __future__ import annotations

import argparse

import numpy as np
import pandas as pd
import polars as pl
import pytest

from bench import measures as bench
from bench import measures_naive as naive
from bench import measures_vectorised as vectorised
from bench.measures_data import write_panel
from liqpanel.core.contracts import DAILY
from liqpanel.measures import REGISTRY, compute_monthly


@pytest.fixture(scope="module")
def panel(tmp_path_factory) -> str:
    return str(write_panel(tmp_path_factory.mktemp("bench") / "daily.parquet", securities=12, years=0.5, seed=7))


def test_synthetic_panel_follows_the_daily_contract(panel):
    daily = pl.read_parquet(panel)
    assert {c: daily.schema[c] for c in DAILY} == DAILY
    assert daily.select("security", "date").is_unique().all()
    # Prices are a daily bar: the high and low bound the open and the close (common practice).
    assert (daily["high"] >= daily[["open", "close"]].max_horizontal()).all()
    assert (daily["low"] <= daily[["open", "close"]].min_horizontal()).all()
    assert daily["security"].n_unique() == 12
    # Some months are short (listing) and some returns are exactly zero (one-cent tick).
    assert (daily["ret"] == 0).sum() > 0
    assert daily.group_by("security", "month").len()["len"].min() < 15


def test_naive_baseline_equals_the_library(panel):
    names = list(naive.FUNCTIONS)
    _, rows, base = naive.time_monthly(panel, names)
    ours = compute_monthly(pl.scan_parquet(panel), {n: naive.OPTIONS.get(n) for n in names}).to_pandas()
    assert rows == pl.read_parquet(panel).height
    assert list(base["security"]) == list(ours["security"])
    for name in names:
        # Same missing months, same values up to rounding (ps_gamma: a least-squares
        # solve against the library's centred normal equations).
        a, b = base[name].to_numpy(float), ours[REGISTRY[name].outputs[0]].to_numpy(float)
        assert np.isfinite(b).sum() > len(b) // 2, name
        np.testing.assert_allclose(a, b, rtol=1e-8 if name == "ps_gamma" else 1e-11, atol=0, equal_nan=True,
                                   err_msg=name)


def test_vectorised_baseline_equals_the_library_and_the_naive_one(panel):
    names = list(vectorised.FUNCTIONS)
    assert names == [n for n in naive.FUNCTIONS if n in names] and len(names) == 18
    _, rows, fast = vectorised.time_monthly(panel, names)
    _, _, base = naive.time_monthly(panel, names)
    ours = compute_monthly(pl.scan_parquet(panel), {n: None for n in names}).to_pandas()
    assert rows == pl.read_parquet(panel).height
    assert list(fast["security"]) == list(ours["security"])
    assert list(pd.to_datetime(fast["month"])) == list(pd.to_datetime(ours["month"]))
    for name in names:
        a, b, c = fast[name].to_numpy(float), ours[REGISTRY[name].outputs[0]].to_numpy(float), base[name].to_numpy(float)
        assert np.isfinite(a).sum() > len(a) // 2, name
        # Same missing months; values up to rounding (sums in another order; ps_gamma as above).
        np.testing.assert_allclose(a, b, rtol=1e-8 if name == "ps_gamma" else 1e-11, atol=0, equal_nan=True,
                                   err_msg=name)
        np.testing.assert_allclose(a, c, rtol=1e-8 if name == "ps_gamma" else 1e-11, atol=0, equal_nan=True,
                                   err_msg=name)


def test_benchmark_runs_on_a_tiny_panel_and_prints_every_family(tmp_path):
    args = argparse.Namespace(securities=8, years=0.25, baseline_fraction=0.5, gibbs_fraction=0.5, gibbs_months=2,
                              sweeps=20, repeat=1, workdir=str(tmp_path), seed=3, lot_fraction=0.5, lot_months=3)
    rows, lines = bench.run(args, echo=lambda text: None, isolate=lambda f, *a: f(*a))
    labels = [r.label for r in rows]
    assert labels == [*bench._families(), "all daily measures", "gibbs (20 sweeps)", "lot (mixed + Y-split)"]
    assert all(r.ours > 0 and r.peak > 0 for r in rows)
    assert all(r.ratio > 0 for r in rows) and all(r.over_floor > 0 for r in rows[:-2])
    assert all(r.vectorised_ratio > 0 for r in rows[:-2]) and rows[-1].vectorised is None and rows[-2].vectorised is None
    assert rows[-3].baseline == pytest.approx(sum(r.baseline for r in rows[:-3]))
    table = bench.format_table(rows)
    assert all(label in table for label in labels)
    assert lines[0].startswith("all daily measures vs naive baseline")
    assert lines[1].startswith("all daily measures vs vectorised pandas baseline")
    assert lines[-3].startswith("LOT share of the measures stage")  # the LOT fits on half the securities: no stage line
    costs = lines[-1].splitlines()  # each measure alone: ours, the vectorised baseline's (but the effective tick's)
    assert costs[0].split() == ["measure", "ours", "s", "vector", "s", "ratio", "share"]
    measured = {line.split()[0]: line.split() for line in costs[2:-1]}
    assert set(measured) == {n for members in bench._families().values() for n in members}
    assert measured["effective_tick"][2] == "-" and all(row[2] != "-" for n, row in measured.items() if n != "effective_tick")


def test_timed_steps_run_in_a_fresh_process(panel):
    seconds, months, peak = bench.in_fresh_process(bench._run_floor, panel, ["close", "volume"])
    assert seconds > 0 and peak > 0
    assert months == pl.read_parquet(panel).select("security", "month").n_unique()
