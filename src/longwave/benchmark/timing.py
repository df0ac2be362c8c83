"""Wall time and peak memory of one call: the benchmark runner's only stopwatch.

Peak memory is measured with :mod:`tracemalloc`, which sees every
allocation made through Python's and numpy's allocators (numpy reports its
array buffers to it) but not BLAS workspaces or memory that compiled loops
allocate internally; the Kalman loops write into caller-allocated buffers,
so for them it is complete. Tracing adds some overhead to Python-heavy code
(about 15 % on a Kalman fit here), the same for every method; pass
``memory=False`` for a clean time.
"""

from __future__ import annotations

import time
import tracemalloc
from dataclasses import dataclass


@dataclass(frozen=True)
class Cost:
    """What one call cost.

    Attributes
    ----------
    seconds : float
        Wall time.
    peak_bytes : int
        Peak traced memory above the level at the start of the call; -1 when
        not measured.
    """

    seconds: float
    peak_bytes: int = -1

    @property
    def peak_mb(self) -> float:
        """Peak memory in MB (1e6 bytes); NaN when not measured."""
        return self.peak_bytes / 1e6 if self.peak_bytes >= 0 else float("nan")


def time_call(fn, *args, memory: bool = True, **kwargs):
    """Call ``fn(*args, **kwargs)`` once and measure it.

    Parameters
    ----------
    fn : callable
    *args, **kwargs
        Passed to ``fn``.
    memory : bool, default True
        Also trace the peak memory (see the module docstring).

    Returns
    -------
    result : object
        What ``fn`` returned.
    cost : Cost

    Examples
    --------
    >>> import numpy as np
    >>> out, cost = time_call(np.ones, 1_000_000)
    >>> cost.peak_bytes >= 8_000_000
    True
    """
    if not memory:
        start = time.perf_counter()
        result = fn(*args, **kwargs)
        return result, Cost(time.perf_counter() - start)
    was_tracing = tracemalloc.is_tracing()
    if not was_tracing:
        tracemalloc.start()
    base, _ = tracemalloc.get_traced_memory()
    tracemalloc.reset_peak()
    start = time.perf_counter()
    try:
        result = fn(*args, **kwargs)
        seconds = time.perf_counter() - start
        _, peak = tracemalloc.get_traced_memory()
    finally:
        if not was_tracing:
            tracemalloc.stop()
    return result, Cost(seconds, max(int(peak - base), 0))


def time_best(fn, *args, repeat: int = 5, budget: float = 0.2, **kwargs):
    """Like :func:`time_call`, but a fast call is repeated and its best time kept.

    The first call is traced for memory; further untraced calls follow while
    the total stays under ``budget`` seconds, up to ``repeat`` calls in all.
    The minimum is the least noisy estimate on a shared machine, since noise
    only ever adds time (common practice for micro-benchmarks).

    Returns
    -------
    result : object
        From the first call.
    cost : Cost
        Best wall time, peak memory of the first call.
    """
    if repeat < 1:
        raise ValueError(f"repeat must be >= 1, got {repeat}")
    result, first = time_call(fn, *args, **kwargs)
    best, spent = first.seconds, first.seconds
    for _ in range(repeat - 1):
        if spent + best > budget:
            break
        _, again = time_call(fn, *args, memory=False, **kwargs)
        best, spent = min(best, again.seconds), spent + again.seconds
    return result, Cost(best, first.peak_bytes)
