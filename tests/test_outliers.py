"""The Brownlees & Gallo (2006) outlier filter against a direct computation
with scipy's trimmed statistics (reference library), on planted outliers."""

import numpy as np
import pytest
from scipy.stats import mstats, trim_mean

from liqpanel.clean.outliers import neighbourhood_outliers


def _reference(prices, k, delta, gamma, threshold):
    """Rule of Brownlees & Gallo (2006): keep when |p - trimmed mean| < 3 s + gamma,
    with scipy.stats.trim_mean and scipy.stats.mstats.trimmed_std on the k neighbours."""
    n = len(prices)
    flags = []
    for i in range(n):
        first = min(max(i - k // 2, 0), n - (k + 1))
        neighbours = np.delete(prices[first : first + k + 1], i - first)
        mean = trim_mean(neighbours, delta / 2)
        sd = mstats.trimmed_std(neighbours, limits=(delta / 2, delta / 2), ddof=1)
        flags.append(abs(prices[i] - mean) >= threshold * sd + gamma)
    return np.array(flags)


@pytest.mark.parametrize("k,delta", [(20, 0.10), (10, 0.20), (6, 0.0)])
def test_matches_scipy_trimmed_statistics(k, delta):
    rng = np.random.default_rng(k)
    prices = 50 + np.cumsum(rng.normal(0, 0.02, 120))
    prices[[5, 60, 118]] += [0.8, -1.2, 0.9]  # planted errors, also at the day's edges
    ours = neighbourhood_outliers(np.zeros(120, dtype=int), prices, k=k, delta=delta, gamma=0.02)
    expected = _reference(prices, k, delta, 0.02, 3.0)
    assert ours.tolist() == expected.tolist()
    assert ours[[5, 60, 118]].all()


def test_granularity_spares_a_one_tick_move_in_a_flat_run():
    # gamma exists so that k equal prices (s = 0) do not flag a one-tick change
    prices = np.full(30, 10.0)
    prices[15] = 10.01
    assert not neighbourhood_outliers(np.zeros(30, dtype=int), prices, k=20, gamma=0.02).any()
    assert neighbourhood_outliers(np.zeros(30, dtype=int), prices, k=20, gamma=0.0)[15]


def test_days_are_separate_and_thin_days_are_not_filtered():
    prices = np.concatenate([np.full(25, 10.0), np.full(25, 20.0), [5.0, 5.0, 50.0]])
    prices[3] = 11.0
    group = np.repeat([0, 1, 2], [25, 25, 3])
    flags = neighbourhood_outliers(group, prices, k=20, delta=0.1, gamma=0.02)
    assert flags.tolist() == [i == 3 for i in range(53)]  # day 2's level is not an outlier; day 3 has 3 trades


def test_chunks_do_not_change_the_result():
    rng = np.random.default_rng(1)
    prices = 30 + np.cumsum(rng.normal(0, 0.05, 2000))
    prices[rng.integers(0, 2000, 20)] += 2.0
    group = np.repeat(np.arange(10), 200)
    whole = neighbourhood_outliers(group, prices)
    assert whole.sum() >= 15
    assert (neighbourhood_outliers(group, prices, chunk_rows=37) == whole).all()
