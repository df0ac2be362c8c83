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
    # and with as many queries again past the last time (a forecast), an odd count
    ahead = np.linspace(t[-1], t[-1] + 50.0, sorted_q.size + 1)
    forecast = np.sort(np.concatenate([sorted_q, ahead]))
    shuffled = rng.permutation(sorted_q)
    for tq, expect_sorted in ((sorted_q, True), (forecast, True), (shuffled, False)):
        idx = np.empty(tq.size, dtype=np.int64)
        assert search.locate(t, tq, idx) is expect_sorted
        np.testing.assert_array_equal(idx, np.searchsorted(t, tq, side="right") - 1)


@pytest.mark.parametrize("n", [0, 1, 2, 1023, 1024, 1025, 5000])
def test_is_sorted_equals_numpy(rng, n):
    # source: the definition, checked with numpy (np.all(np.diff(x) >= 0))
    x = np.sort(rng.normal(size=n))
    if n > 10:
        x[n // 3:n // 3 + 5] = x[n // 3]  # ties are in order
    assert search.is_sorted(x)
    for at in {1, n // 2, n - 1} if n > 1 else ():
        y = x.copy()
        y[at] = y[at - 1] - 1.0  # one descent, at the start, middle or end of a stretch
        assert search.is_sorted(y) is bool(np.all(np.diff(y) >= 0)) is False


def test_first_at_or_after_and_sorted_locate_equal_searchsorted(rng):
    t = _data_times(rng, 3000)
    tq = np.sort(np.concatenate([rng.uniform(t[0] - 5.0, t[-1] + 5.0, 4000), t[::5]]))
    for value in (t[0] - 1.0, t[0], t[17], t[-1], t[-1] + 1.0, 0.5 * (t[100] + t[101])):
        for lo, hi in ((0, tq.size), (100, 2500), (7, 7)):
            expect = np.searchsorted(tq[lo:hi], value, side="left") + lo
            assert search.first_at_or_after(tq, value, lo, hi) == expect
    # a window of the data, as the compiled lean pass locates a block's queries
    window = t[999:2001]
    inside = tq[(tq >= window[0]) & (tq < t[2001])]
    idx = np.empty(inside.size, dtype=np.int64)
    search.locate_sorted_serial(window, inside, idx)
    np.testing.assert_array_equal(idx, np.searchsorted(window, inside, side="right") - 1)


# 8 * 65536 + 3 points: 9 chunks, the parallel branch (search._SCAN_PARALLEL_CHUNKS)
@pytest.mark.parametrize("n", [0, 1, 5, 65536, 65537, 200_001, 8 * 65536 + 3])
def test_scan_finds_first_non_finite_and_order(rng, n):
    # source: numpy (np.isfinite, np.diff) on the same arrays
    x = np.sort(rng.normal(size=n))
    assert search.scan(x) == (-1, True)
    if n < 2:
        return
    y = x.copy()
    y[n // 2] = y[n // 2 - 1] - 1.0
    assert search.scan(y) == (-1, bool(np.all(np.diff(y) >= 0))) == (-1, False)
    if n > 3 * 65536:  # a descent exactly across the boundary of two chunks
        y = x.copy()
        y[3 * 65536] = y[3 * 65536 - 1] - 1.0
        assert search.scan(y) == (-1, False)
    for bad in (np.nan, np.inf, -np.inf):
        for where in sorted({0, 1, n // 2, n - 1}):
            z = x.copy()
            z[where] = bad
            z[-1] = bad if where < n - 1 else z[-1]  # a later one too: the first is named
            first = int(np.flatnonzero(~np.isfinite(z))[0])
            assert search.scan(z)[0] == first == where


def _wide_gap_numpy(t, lo, hi, centre):
    gaps = t[lo + 1:hi + 1] - t[lo:hi]
    if not gaps.max() > 0.0:
        return -1
    wide = np.flatnonzero(gaps >= 0.5 * gaps.max())
    return lo + int(wide[np.argmin(np.abs(wide + lo - centre))])


@pytest.mark.parametrize("n", [2, 9, 1000, 50_001])
def test_wide_gap_nearest_equals_numpy(rng, n):
    # integer times: many equal gaps, so ties (the first is kept, as np.argmin) are exercised
    t = np.cumsum(rng.integers(0, 4, n)).astype(float)
    for lo, hi in [(0, n - 1), (n // 3, n - 1 - n // 4), (n // 2, n // 2)]:
        for centre in [(n - 1) / 2, lo, hi + 0.5]:
            want = _wide_gap_numpy(t, lo, hi, centre) if hi > lo else -1
            assert search.wide_gap_nearest(t, lo, hi, centre) == want
    assert search.wide_gap_nearest(np.zeros(n), 0, n - 1, 1.0) == -1  # no positive gap


