"""Locating query times among sorted data times; checking and reversing their order."""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

_SORTED_STRIDE = 1024


@njit(cache=True, nogil=True)
def is_sorted(x):
    """Whether ``x`` is in non-decreasing order (of finite values).

    The smallest step over each stretch of ``_SORTED_STRIDE`` is checked
    once: a loop that stops at the first descent does not vectorise, and on
    a sorted array of 1e6 it took 1.3x as long as this one, which still stops
    within a stretch of the first descent.
    """
    n = x.size
    lo = 0
    while lo + 1 < n:
        hi = min(lo + _SORTED_STRIDE, n - 1)
        step = 0.0
        for i in range(lo, hi):
            step = min(step, x[i + 1] - x[i])
        if step < 0.0:
            return False
        lo = hi
    return True


_SCAN_CHUNK = 65536
# Below this many chunks the scan runs in the calling thread: waking numba's
# sleeping workers (passive waiting, ``longwave._config``) took 0.2-0.5 ms on
# the virtual machines measured, more than one core scanning 1e5 times.
_SCAN_PARALLEL_CHUNKS = 8


@njit(cache=True, nogil=True)
def _scan_chunk(x, lo, hi):
    """``(first, drop)`` over ``x[lo:hi]``: index of its first non-finite entry
    (``x.size`` if none) and its smallest step ``x[i] - x[i - 1]`` (0 if none
    is negative), for ``i >= max(lo, 1)``."""
    n = x.size
    # x - x is 0 for a finite x and NaN otherwise: a NaN in the sums is the
    # rare case, then found by the slow scan. Four accumulators of each kind:
    # one would make every step wait for the last (3.2x as long at n = 1e6).
    s0 = s1 = s2 = s3 = 0.0
    m0 = m1 = m2 = m3 = 0.0
    if lo == 0 and hi > 0:
        s0 = x[0] - x[0]
    i = max(lo, 1)
    while i + 4 <= hi:
        a0, a1, a2, a3, a4 = x[i - 1], x[i], x[i + 1], x[i + 2], x[i + 3]
        s0 += a1 - a1
        s1 += a2 - a2
        s2 += a3 - a3
        s3 += a4 - a4
        m0 = min(m0, a1 - a0)
        m1 = min(m1, a2 - a1)
        m2 = min(m2, a3 - a2)
        m3 = min(m3, a4 - a3)
        i += 4
    while i < hi:
        s0 += x[i] - x[i]
        m0 = min(m0, x[i] - x[i - 1])
        i += 1
    first = n
    if (s0 + s1) + (s2 + s3) != 0.0:
        for k in range(lo, hi):
            if not math.isfinite(x[k]):
                first = k
                break
    return first, min(min(m0, m1), min(m2, m3))


@njit(cache=True, nogil=True)
def scan(x):
    """``(first, in_order)`` of times ``x`` in one pass, parallel when long.

    ``first`` is the index of the first non-finite entry (-1 if none);
    ``in_order`` whether ``x`` is non-decreasing (meaningful when ``first``
    is -1). A posterior's queries are checked for both before it predicts:
    one pass instead of two over an array that may not fit in the cache.
    """
    n = x.size
    n_chunks = (n + _SCAN_CHUNK - 1) // _SCAN_CHUNK
    if n_chunks >= _SCAN_PARALLEL_CHUNKS:
        first, drop = _scan_parallel(x, n_chunks)
    else:
        first, drop = _scan_chunk(x, 0, n)
    return (first if first < n else -1), bool(drop >= 0.0)


@njit(cache=True, parallel=True)
def _scan_parallel(x, n_chunks):
    """:func:`_scan_chunk` over all of ``x``, a chunk per task. One parallel
    region only: with ``parallel=True`` numba would run array expressions
    (``np.full``, ``.min()``) as regions of their own, each waking the workers."""
    n = x.size
    bad = np.empty(n_chunks, dtype=np.int64)
    drop = np.empty(n_chunks)
    for c in prange(n_chunks):
        bad[c], drop[c] = _scan_chunk(x, c * _SCAN_CHUNK, min((c + 1) * _SCAN_CHUNK, n))
    first, low = n, 0.0
    for c in range(n_chunks):
        first = min(first, bad[c])
        low = min(low, drop[c])
    return first, low


@njit(cache=True, nogil=True)
def first_at_or_after(x, value, lo, hi):
    """Smallest ``i`` in ``[lo, hi]`` with ``x[i] >= value`` (``hi`` if none).

    Binary search over sorted ``x[lo:hi]``: ``np.searchsorted(x[lo:hi],
    value, side="left") + lo``.
    """
    while lo < hi:
        mid = (lo + hi) // 2
        if x[mid] < value:
            lo = mid + 1
        else:
            hi = mid
    return lo


@njit(cache=True)
def _last_at_or_before(t, x, lo=0):
    """Largest i with ``t[i] <= x``, or -1 (binary search; ``t[:lo] <= x`` is known)."""
    hi = t.size
    while lo < hi:
        mid = (lo + hi) // 2
        if t[mid] <= x:
            lo = mid + 1
        else:
            hi = mid
    return lo - 1


@njit(cache=True, parallel=True)
def _search_each(t, tq, idx):
    for i in prange(tq.size):
        idx[i] = _last_at_or_before(t, tq[i])


@njit(cache=True, nogil=True)
def _search_each_serial(t, tq, idx):
    for i in range(tq.size):
        idx[i] = _last_at_or_before(t, tq[i])


_MERGE_CHUNK = 32768
_WINDOW = 8


@njit(cache=True, nogil=True)
def _advance(t, x, k):
    """``k`` grown until ``t[k] > x``, from a ``k`` with ``t[:k] <= x``."""
    n = t.size
    if k + _WINDOW > n:  # near the end of t: a step at a time
        while k < n and t[k] <= x:
            k += 1
        return k
    step = 0
    for j in range(_WINDOW):
        step += t[k + j] <= x
    k += step
    if step == _WINDOW and k < n and t[k] <= x:  # a longer stretch: rare
        k = _last_at_or_before(t, x, k) + 1
    return k


@njit(cache=True, nogil=True)
def _merge_range(t, tq, idx, lo, hi):
    """``idx[lo:hi]`` for sorted queries ``tq[lo:hi]``.

    Each query advances a position ``k`` (``t[:k] <= query``) by how many of
    the next ``_WINDOW`` data times it passes, counted as a sum of
    comparisons: a branch per data point would be mispredicted about once a
    query on irregular times, which cost ~3x this loop. Each step waits for
    the last one's ``k``, so the range is walked as two halves at once, whose
    steps overlap (1.5x faster at n = 1e6). The two windowed steps are
    written out here rather than as two calls of :func:`_advance`, which
    numba left as calls and which took 2.4-2.6x as long at n = 1e6.
    """
    n = t.size
    half = (hi - lo) // 2
    mid = lo + half
    ka = _last_at_or_before(t, tq[lo]) + 1
    kb = _last_at_or_before(t, tq[mid]) + 1 if half else ka
    for i in range(half):
        xa = tq[lo + i]
        xb = tq[mid + i]
        if kb + _WINDOW <= n:  # and so ka + _WINDOW <= n: stream a is behind b
            sa = 0
            sb = 0
            for j in range(_WINDOW):
                sa += t[ka + j] <= xa
                sb += t[kb + j] <= xb
            ka += sa
            kb += sb
            if sa == _WINDOW and ka < n and t[ka] <= xa:  # a longer stretch: rare
                ka = _last_at_or_before(t, xa, ka) + 1
            if sb == _WINDOW and kb < n and t[kb] <= xb:
                kb = _last_at_or_before(t, xb, kb) + 1
        else:
            ka = _advance(t, xa, ka)
            kb = _advance(t, xb, kb)
        idx[lo + i] = ka - 1
        idx[mid + i] = kb - 1
    if hi - mid > half:  # an odd count: the last query continues stream b
        idx[hi - 1] = _advance(t, tq[hi - 1], kb) - 1


@njit(cache=True, parallel=True)
def _merge_chunks(t, tq, idx):
    n_chunks = (tq.size + _MERGE_CHUNK - 1) // _MERGE_CHUNK
    for c in prange(n_chunks):
        lo = c * _MERGE_CHUNK
        _merge_range(t, tq, idx, lo, min(lo + _MERGE_CHUNK, tq.size))


@njit(cache=True)
def locate(t, tq, idx):
    """``idx[i]`` = index of the last ``t <= tq[i]`` (-1 before the first).

    Equals ``np.searchsorted(t, tq, side="right") - 1`` for sorted ``t``. Sorted
    queries (the usual grid) are merged, in parallel chunks that each start by
    one binary search, counting the data points among the next few that a query
    passes (without branches) and jumping by binary search over longer
    stretches, so a few queries in a long series stay cheap; otherwise each
    query is a binary search, in parallel. Returns whether ``tq`` was sorted.
    """
    if not is_sorted(tq):
        _search_each(t, tq, idx)
        return False
    if tq.size:
        _merge_chunks(t, tq, idx)
    return True


@njit(cache=True, nogil=True)
def locate_serial(t, tq, idx, known_sorted=False):
    """:func:`locate` in the calling thread, with the GIL released.

    For callers running two searches at once in threads: numba's default
    thread pool does not allow two parallel regions at the same time.
    ``known_sorted`` skips the check of the queries' order.
    """
    if not known_sorted and not is_sorted(tq):
        _search_each_serial(t, tq, idx)
        return False
    if tq.size:
        _merge_range(t, tq, idx, 0, tq.size)
    return True


@njit(cache=True, nogil=True)
def locate_sorted_serial(t, tq, idx):
    """:func:`locate` for queries known to be sorted, in the calling thread
    (``idx`` of ``tq``'s size; for the compiled loops, which locate a few
    thousand queries at a time into a buffer they reuse)."""
    if tq.size:
        _merge_range(t, tq, idx, 0, tq.size)


@njit(cache=True, nogil=True)
def reverse_in_place(x):
    """Reverse ``x`` in place: a split posterior's right half answers its
    queries in reversed time, into the caller's output, without a copy."""
    n = x.size
    for i in range(n // 2):
        x[i], x[n - 1 - i] = x[n - 1 - i], x[i]


@njit(cache=True, nogil=True)
def wide_gap_nearest(t, lo, hi, centre):
    """Among the gaps ``t[j + 1] - t[j]``, ``lo <= j < hi``, at least half the
    widest, the ``j`` nearest ``centre`` (the first of a tie); -1 when no gap
    is positive. One pass to find the widest and one to choose, with no
    temporary arrays (the join of a split posterior, ``kalman_split``)."""
    widest = 0.0
    for j in range(lo, hi):
        g = t[j + 1] - t[j]
        if g > widest:
            widest = g
    if not widest > 0.0:
        return -1
    best, best_d = -1, np.inf
    for j in range(lo, hi):
        if t[j + 1] - t[j] >= 0.5 * widest:
            dist = abs(j - centre)
            if dist < best_d:
                best, best_d = j, dist
    return best
