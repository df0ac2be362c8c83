"""Locating query times among sorted data times, against ``numpy.searchsorted``."""

import numpy as np
import pytest

from longwave._loops import search


def _data_times(rng, n):
    dt = rng.exponential(1.0, n - 1)
    dt[rng.choice(n - 1, n // 20, replace=False)] = 0.0  # repeated times
    dt[rng.choice(n - 1, 3, replace=False)] = 300.0  # gaps longer than any merge window
    return np.concatenate([[0.0], np.cumsum(dt)])


@pytest.mark.parametrize("n_query", [1, 9, 1000, 70_000])
def test_locate_equals_searchsorted(rng, n_query):
    t = _data_times(rng, 5000)
    grid = np.linspace(t[0] - 10.0, t[-1] + 10.0, n_query)
    # sorted queries: a grid with data times themselves and points past both ends mixed in
    sorted_q = np.sort(np.concatenate([grid, t[::7], t[-9:], [t[0] - 1e6, t[-1] + 1e6]]))
    shuffled = rng.permutation(sorted_q)
    for tq, expect_sorted in ((sorted_q, True), (shuffled, False)):
        idx = np.empty(tq.size, dtype=np.int64)
        assert search.locate(t, tq, idx) is expect_sorted
        np.testing.assert_array_equal(idx, np.searchsorted(t, tq, side="right") - 1)
