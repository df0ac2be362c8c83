"""Locating query times among sorted data times."""

from __future__ import annotations

from numba import njit, prange

_SORTED_STRIDE = 1024


@njit(cache=True, nogil=True)
def is_sorted(x):
    """Whether ``x`` is in non-decreasing order.

    Counted without a branch per element, over stretches of ``_SORTED_STRIDE``
    (a loop that stops at the first descent does not vectorise; this one
    costs about a tenth of it on a sorted array, and still stops early).
    """
    n = x.size
    for lo in range(1, n, _SORTED_STRIDE):
        hi = min(lo + _SORTED_STRIDE, n)
        drops = 0
        for i in range(lo, hi):
            drops += x[i] < x[i - 1]
        if drops:
            return False
    return True


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
def _merge_range(t, tq, idx, lo, hi):
    """``idx[lo:hi]`` for sorted queries ``tq[lo:hi]``."""
    n = t.size
    k = _last_at_or_before(t, tq[lo]) + 1  # t[:k] <= current query
    for i in range(lo, hi):
        x = tq[i]
        if k + _WINDOW <= n:
            # How many of the next few (sorted) data times are <= x, as a sum of
            # comparisons: a branch per data point would be mispredicted about
            # once a query on irregular times, which cost ~3x this whole loop.
            step = 0
            for j in range(_WINDOW):
                step += t[k + j] <= x
            k += step
            if step == _WINDOW and k < n and t[k] <= x:  # a longer stretch: rare
                k = _last_at_or_before(t, x, k) + 1
        else:
            while k < n and t[k] <= x:
                k += 1
        idx[i] = k - 1


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
