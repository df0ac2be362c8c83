"""New float64 arrays laid out so that the kernel can back them with huge pages.

On the virtual machines measured (``bench/bench_kalman.py``), the first touch
of a fresh 4 kB page cost 3 to 7 µs (a fault that leaves the guest), so
writing a fresh array of n/2 doubles could take longer than the arithmetic
that filled it. numpy asks the kernel for transparent huge pages (2 MiB, one
fault each) for allocations of 4 MiB or more, but only the 2 MiB-aligned
stretches inside an allocation get them. The posteriors' large outputs and
temporaries therefore come from :func:`fresh_rows`: one allocation,
aligned to 2 MiB when large. Elsewhere the layout changes nothing: the rows
are ordinary contiguous arrays.
"""

from __future__ import annotations

import numpy as np

# A transparent huge page on x86-64 (and 4 kB-page arm64): common practice.
_HUGE_PAGE = 2 * 2**20
# numpy's threshold for asking for huge pages (numpy/_core/src/multiarray/alloc.c;
# from memory of its source, checked here by the fault counts in the benchmark).
_HUGE_FROM = 4 * 2**20


def fresh_rows(rows, size):
    """``rows`` new, uninitialised float64 rows of ``size`` each, as one array.

    Parameters
    ----------
    rows, size : int

    Returns
    -------
    ndarray of shape (rows, size)
        C-contiguous; its rows are contiguous arrays. When it holds 4 MiB or
        more it is a view into an allocation 2 MiB longer, starting at a
        2 MiB boundary.
    """
    count = rows * size
    if count * 8 < _HUGE_FROM:
        return np.empty((rows, size))
    spare = _HUGE_PAGE // 8
    base = np.empty(count + spare)
    skip = (-base.ctypes.data % _HUGE_PAGE) // 8
    return base[skip:skip + count].reshape(rows, size)
