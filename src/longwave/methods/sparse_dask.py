"""Distributed passes of the sparse methods: map over data ranges, reduce m-by-m sums.

The only module of ``longwave.methods`` that imports dask (lazily, inside
:func:`run_distributed`). The chunk context (O(m^2)) and the data source are
sent once per pass to every worker; each task reads its own range
``lo:hi`` of the source (memory maps reopen by file name, readers open their
file) and returns an :class:`~longwave.methods.sparse_stats.Accumulator`;
results stream back through ``as_completed`` into one running sum, so only
m-by-m statistics travel and the client never holds more than one.
"""

from __future__ import annotations

import pickle

from .._config import limit_threads
from .sparse_stats import accumulate_range


def _task(kind, ctx, source, lo, hi, chunk, threads):
    # Workers share the machine's cores: nested BLAS/numba threads would only compete.
    with limit_threads(threads):
        return accumulate_range(kind, ctx, source, lo, hi, chunk)


def run_distributed(client, kind, ctx, source, chunk, task_size, threads: int = 1):
    """Pass ``kind`` as a map-reduce on a ``dask.distributed`` client.

    Parameters
    ----------
    client : dask.distributed.Client
    kind : str
        Pass name (see ``sparse_stats.CHUNK_FUNCTIONS``).
    ctx : ChunkContext
    source : ChunkedSeries
        Must pickle (arrays, memory maps or a picklable reader).
    chunk, task_size : int
        Points per chunk inside a task, points per task.
    threads : int, default 1
        BLAS and numba threads inside each task.

    Returns
    -------
    Accumulator
        Sum over all tasks.
    """
    from distributed import as_completed

    try:
        pickle.dumps(source, protocol=pickle.HIGHEST_PROTOCOL)
    except Exception as exc:  # h5py datasets, open files, lambdas: say what to do instead
        raise TypeError(
            f"the distributed sparse path sends the data source to the workers, but "
            f"{source!r} cannot be pickled ({exc}); build it as "
            "ChunkedSeries.from_reader(reader, n) with a reader that opens the file by "
            "name on the worker, or from np.load(path, mmap_mode='r') arrays"
        ) from exc
    # hash=False: content-hashed keys would collide with the previous pass's
    # identical source while the scheduler is still releasing it ("lost dependencies")
    [ctx_f] = client.scatter([ctx], broadcast=True, hash=False)
    [src_f] = client.scatter([source], broadcast=True, hash=False)
    futures = [
        client.submit(_task, kind, ctx_f, src_f, lo, hi, chunk, threads, pure=False)
        for lo, hi in source.ranges(task_size)
    ]
    total = None
    for fut in as_completed(futures):
        part = fut.result()
        total = part if total is None else total.add(part)
        fut.release()
    return total
