"""Runtime configuration: threads, block and chunk sizes, limits.

Everything tunable at run time lives here, with an environment-variable
override each, so no other module reads ``os.environ``.

Thread waiting policy
---------------------
numba's parallel workers and OpenBLAS's threads both spin for a while after a
parallel region ends. On a 2-core machine a sparse evaluation that alternates
the two (numba block evaluation, then a BLAS product) can slow down by a large
factor while each pool spins waiting for the other. Making the waiting
passive fixes it, but only if the variables are set *before* numpy and numba
load their thread pools, which is why :func:`apply_thread_environment` runs
first thing in ``longwave/__init__.py``. If numpy was imported earlier, the
settings may have no effect; set the variables in the shell instead.
"""

from __future__ import annotations

import os
from dataclasses import dataclass

_THREAD_ENV_DEFAULTS = {
    "OMP_WAIT_POLICY": "PASSIVE",
    "OPENBLAS_THREAD_TIMEOUT": "1",
    "KMP_BLOCKTIME": "0",
}


def apply_thread_environment() -> None:
    """Set passive thread-waiting variables unless the user already set them."""
    for key, value in _THREAD_ENV_DEFAULTS.items():
        os.environ.setdefault(key, value)


def _env_int(name: str, default: int) -> int:
    raw = os.environ.get(name)
    if raw is None or raw == "":
        return default
    try:
        value = int(raw)
    except ValueError as exc:
        raise ValueError(
            f"environment variable {name} must be a whole number, got {raw!r}"
        ) from exc
    if value <= 0:
        raise ValueError(f"environment variable {name} must be positive, got {value}")
    return value


@dataclass(frozen=True)
class Settings:
    """Tunable sizes, read from the environment once per call of :func:`settings`.

    Attributes
    ----------
    exact_max_n : int
        Largest series :class:`longwave.methods.Exact` accepts by default
        (``LONGWAVE_EXACT_MAX_N``, default 10000: the dense matrix and its
        inverse then take 1.6 GB).
    chunk_size : int
        Points per chunk when streaming long series (``LONGWAVE_CHUNK``,
        default 65536).
    sparse_block_mb : int
        Size in MB of one (m, chunk) kernel block of the sparse methods
        (``LONGWAVE_SPARSE_BLOCK_MB``, default 16): the chunk is this divided
        by ``8 m``, capped at ``chunk_size``. A few such blocks are alive at
        once, so memory stays O(m * chunk) whatever n is.
    kalman_states_mb : int
        Memory in MB a Kalman posterior may spend on arrays of length n
        (``LONGWAVE_KALMAN_STATES_MB``, default 128): from a second
        prediction on, a posterior queried block by block keeps every
        block's states when ``2 n (d + d^2)`` doubles fit. Small on purpose:
        on virtual machines, touching fresh memory costs 0.15 to 2 ms per MB.
        (The specialised loops' posteriors are lean at any size; see
        ``KalmanPosterior``.)
    split_min_n : int
        Shortest series whose Kalman posterior is built in two halves on two
        cores when numba may use two threads (``LONGWAVE_SPLIT_MIN_N``,
        default 100000; see ``methods/kalman_split.py``). Below it, starting a
        thread and joining the halves cost more than they save.
    """

    exact_max_n: int
    chunk_size: int
    sparse_block_mb: int = 16
    kalman_states_mb: int = 128
    split_min_n: int = 100_000

    def sparse_chunk(self, m: int) -> int:
        """Points per chunk for a sparse method with ``m`` inducing times."""
        return int(max(256, min(self.chunk_size, self.sparse_block_mb * 2**20 // (8 * m))))


def settings() -> Settings:
    """Return the current settings (environment overrides applied)."""
    return Settings(
        exact_max_n=_env_int("LONGWAVE_EXACT_MAX_N", 10_000),
        chunk_size=_env_int("LONGWAVE_CHUNK", 65_536),
        sparse_block_mb=_env_int("LONGWAVE_SPARSE_BLOCK_MB", 16),
        kalman_states_mb=_env_int("LONGWAVE_KALMAN_STATES_MB", 128),
        split_min_n=_env_int("LONGWAVE_SPLIT_MIN_N", 100_000),
    )


def limit_threads(n: int = 1):
    """Context manager holding BLAS threads at ``n`` (threadpoolctl) and numba's too.

    Used by the survey workers, where parallelism comes from processes and
    nested threads would only compete for the same cores.
    """
    import contextlib

    import numba
    from threadpoolctl import threadpool_limits

    @contextlib.contextmanager
    def _ctx():
        previous = numba.get_num_threads()
        numba.set_num_threads(min(n, numba.config.NUMBA_NUM_THREADS))
        try:
            with threadpool_limits(limits=n):
                yield
        finally:
            numba.set_num_threads(previous)

    return _ctx()
