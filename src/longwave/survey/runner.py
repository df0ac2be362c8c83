"""Running a survey: every object through the pipeline, serially or on dask.distributed.

The one place (with the sparse methods' distributed path) that imports dask.

Execution
---------
* Objects travel in batches (default 64 per task), so scheduling costs are
  paid per batch, not per object.
* At most ``in_flight`` tasks (default: two per worker thread, so a worker
  always has its next batch queued) are submitted at a time; a new batch is
  read and submitted only when one completes. Client memory is therefore
  bounded by those batches, however many objects the survey holds.
* Results come back through ``as_completed`` and only the client writes the
  result file, so there is one writer and no locking between workers.
* A lost worker is survived: the scheduler reruns its tasks elsewhere
  (``retries`` covers exceptions inside a task). A batch that still fails is
  split and its objects resubmitted one by one, so only the object that
  kills workers is recorded as ``failed``. If tasks fail before any has
  succeeded, the run stops with :class:`ClusterError` instead: that is a
  broken cluster, and recording every object as failed would make a resume
  skip them all.
* From a survey HDF5 file, an embedded cluster's workers read their
  batches themselves (``workers_read``): the client sends each task a
  :class:`~longwave.storage.stored_batch.StoredBatch` (path, positions, ids)
  instead of the arrays, so on a small machine the client, which shares the
  cores with the workers, neither reads nor serialises the data, and the
  data never pass through the scheduler. A remote cluster gets the arrays
  unless told that its workers see the file (``workers_read=True``).
* Every id is written once: ids already stored (``resume``) are not read
  again, and a result for an id already written is dropped and counted.
"""

from __future__ import annotations

import logging
import os
import sys
import time
from contextlib import ExitStack

import dask
from distributed import Client, LocalCluster, as_completed
from tqdm import tqdm

from .. import methods
from ..storage import ObjectResult, ResultStore
from ..storage.stored_batch import StoredBatch
from .idset import IdSet
from .initial import param_names
from .inputs import SurveyInput
from .pipeline import AUTO, ObjectFit, PipelineConfig, fit_batch, warm_up
from .spec import ModelSpec, parse_spec
from .summary import SurveySummary, Tally


class _Writer:
    """The single consumer: writes results and predictions, tallies, moves the bar."""

    def __init__(self, store, seen: IdSet, bar, tally: Tally):
        # ``seen``: every id written or stored, compact (survey/idset.py) so the
        # guard does not grow the client by ~90 bytes an object.
        self.store, self.seen, self.bar, self.tally = store, seen, bar, tally

    def consume(self, fits: list[ObjectFit]) -> None:
        for fit in fits:
            result = fit.result
            if not self.seen.add(result.id):
                self.tally.duplicates += 1
                continue
            if fit.prediction is not None:
                p = fit.prediction
                self.store.append_prediction(result.id, p.t, p.mean, p.std)
            self.store.append(result)
            self.tally.add(result)
        self.bar.update(len(fits))


def _failed(batch, exc) -> list[ObjectFit]:
    message = f"task failed on the cluster: {type(exc).__name__}: {exc}"
    return [ObjectFit(ObjectResult(id=str(obj.id), status="failed", message=message))
            for obj in batch]


def _run_serial(batches, config, writer) -> None:
    for batch in batches:
        writer.consume(fit_batch(batch, config))


class ClusterError(RuntimeError):
    """Tasks fail on the cluster before any has succeeded: a setup problem, not bad data."""


def _run_distributed(client, batches, config, writer, in_flight: int, retries: int) -> None:
    pending = {}  # future -> its batch, kept for resubmission if the task fails
    queue = as_completed()
    succeeded = False

    def submit(batch):
        future = client.submit(fit_batch, batch, config, pure=False, retries=retries)
        pending[future] = batch
        queue.add(future)

    def top_up():
        # Read the next batches only while fewer than in_flight tasks are out.
        while len(pending) < in_flight:
            following = next(batches, None)
            if following is None:
                return
            submit(following)

    top_up()
    try:
        for future in queue:
            batch = pending.pop(future)
            try:
                fits = future.result()
                succeeded = True
            except Exception as exc:  # worker lost too often, or a task error
                if len(batch) > 1:  # isolate the culprit
                    for single in (batch.split() if isinstance(batch, StoredBatch)
                                   else [[obj] for obj in batch]):
                        submit(single)
                    continue
                if not succeeded:
                    # Every object failing alike (workers that cannot import
                    # longwave, say) must not be recorded as a survey of failures.
                    raise ClusterError(
                        f"tasks fail on the cluster before any succeeded ({type(exc).__name__}: "
                        f"{exc}); check that every worker runs the same environment as this "
                        "client (python -c 'import longwave.survey' on a worker host)"
                    ) from exc
                fits = _failed(batch, exc)
            finally:
                future.release()
            writer.consume(fits)
            top_up()
    except BaseException:
        client.cancel(list(pending))
        raise


def embedded_cluster(workers: int, *, quiet: bool = False) -> LocalCluster:
    """The cluster a survey starts when given no scheduler (use as a context manager).

    ``workers`` single-threaded worker processes bound to 127.0.0.1, BLAS and
    numba pools at one thread, the statistical profiler off, glibc's
    allocator left at its adaptive defaults, and dask's housekeeping timers
    slowed down.
    """
    # The workers' profiler samples every task's stack every 10 ms, which
    # costs about 5-10% of a fit's CPU time; nothing here reads it.
    # The nanny also sets MALLOC_TRIM_THRESHOLD_=65536 in each worker by
    # default. Any such setting turns off glibc's adaptive mmap threshold, so
    # every array above 128 KiB is mapped and unmapped afresh; serial survey
    # runs of 500 objects with it set took 11-17% more CPU than without, run
    # alternately. A None value drops the variable (dask skips None values).
    # The nanny also copies it into this process's environment, which later
    # workers inherit: a default cluster started earlier in this process
    # brings it back (not undone here).
    # Dask's housekeeping runs on timers: an idle cluster of two workers took
    # 9% of a core in this process (scheduler and nannies) and 7% in the
    # workers, mostly the 20 ms event-loop health tick; at the intervals below,
    # 2% and 1.5% (measured with both at rest for 10 s). They only delay
    # warnings, dashboard figures and the memory-limit check.
    with dask.config.set({"distributed.worker.profile.enabled": False,
                          "distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None,
                          "distributed.admin.tick.interval": "200ms",
                          "distributed.admin.system-monitor.interval": "2s",
                          "distributed.worker.memory.monitor-interval": "1s"}):
        return LocalCluster(
            n_workers=workers, threads_per_worker=1, processes=True, host="127.0.0.1",
            dashboard_address=None, silence_logs=logging.ERROR if quiet else logging.WARNING,
            # BLAS pools are held at one thread by the nanny's defaults; numba's too.
            env={"NUMBA_NUM_THREADS": "1"},
        )


def _connect(stack, workers, scheduler, quiet, timeout):
    """A client: to the given scheduler, or to an embedded local cluster."""
    if scheduler:
        try:
            client = stack.enter_context(Client(scheduler, timeout=timeout))
        except OSError as exc:
            raise ValueError(
                f"cannot reach a dask scheduler at {scheduler!r} ({exc}); start one with "
                "`dask scheduler --host 127.0.0.1` and pass the address it prints, for "
                "example --scheduler tcp://127.0.0.1:8786, or leave --scheduler out to use "
                "an embedded cluster") from exc
        try:
            client.wait_for_workers(1, timeout=timeout)
        except TimeoutError as exc:
            raise ValueError(
                f"the scheduler at {scheduler} has no workers after {timeout:.0f} s; "
                f"start one with `dask worker {scheduler} --nthreads 1`") from exc
        info = client.scheduler_info()["workers"]
        return client, len(info), sum(w["nthreads"] for w in info.values()), scheduler
    cluster = stack.enter_context(embedded_cluster(workers, quiet=quiet))
    client = stack.enter_context(Client(cluster))
    return client, workers, workers, "embedded"


def _check_workers_read(client, source) -> None:
    """Fail early, and clearly, if the workers cannot read the survey file.

    A long-table input raises ``ValueError`` from ``SurveyInput.stored_batches``.
    """
    probe = next(source.stored_batches(1), None)
    if probe is None:
        return
    try:
        client.run(probe.read)
    except Exception as exc:
        raise ClusterError(
            f"the workers cannot read {probe.path} ({type(exc).__name__}: {exc}); give them "
            "the same file system, or let the client send the data (workers_read=False)"
        ) from exc


def _check_settings(method, clip, batch_size, workers, in_flight, retries):
    if method.lower() != AUTO and method.lower() not in methods.REGISTRY:
        methods.resolve(method)  # raises, listing the valid names
    if clip is not None and not clip > 0:
        raise ValueError(f"clip must be a positive number of sigmas, got {clip}; e.g. clip=5")
    for name, value, low in (("batch_size", batch_size, 1), ("workers", workers, 0),
                             ("in_flight", in_flight, 1), ("retries", retries, 0)):
        if value is not None and (int(value) != value or value < low):
            raise ValueError(f"{name} must be a whole number >= {low}, got {value!r}")


def run_survey(input, out, *, model="matern32", method: str = AUTO, clip=None,
               max_clip_iter: int = 5, grid=None, inducing=None, workers=None,
               scheduler=None, resume: bool = False, overwrite: bool = False,
               batch_size: int = 64, in_flight=None, retries: int = 2, columns=None,
               workers_read=None,
               progress: bool = True, quiet: bool = False,
               flush_seconds: float = 10.0, flush_rows: int = 1000,
               connect_timeout: float = 30.0) -> SurveySummary:
    """Fit every object of a survey and write one result row per object.

    Parameters
    ----------
    input : str or Path
        Survey HDF5 file or CSV / Parquet / FITS long table (see :class:`SurveyInput`).
    out : str or Path
        Result store (:class:`longwave.storage.ResultStore`) to create, or to
        continue with ``resume=True``.
    model : str or ModelSpec, default "matern32"
        Model specification (see :mod:`longwave.survey.spec`).
    method, clip, max_clip_iter, grid, inducing
        As for :func:`longwave.survey.fit_object`.
    workers : int, optional
        Worker processes of the embedded cluster (one thread each); default
        one per core. ``0`` runs serially in this process.
    scheduler : str, optional
        Address of an existing dask scheduler (``tcp://host:port``); then
        ``workers`` is ignored and that cluster's workers are used.
    resume : bool, default False
        Continue ``out``: ids already stored are skipped. The settings must
        match those stored (the store checks).
    overwrite : bool, default False
        Replace an existing ``out``.
    batch_size : int, default 64
        Objects per task.
    in_flight : int, optional
        Tasks submitted at a time; default two per worker thread.
    retries : int, default 2
        Reruns of a task that raised on a worker.
    columns : dict, optional
        Column names of a long-table input (see :class:`SurveyInput`).
    workers_read : bool, optional
        Let the workers read their objects from the survey HDF5 file instead
        of receiving them from the client. Default: yes for the embedded
        cluster, no with ``scheduler`` (its workers may not see the file;
        pass True when they share this file system). Long tables are always
        read by the client.
    progress : bool, default True
        Progress bar (objects per second, ETA) on stderr.
    quiet : bool, default False
        No progress bar, and only errors from dask's logs.
    flush_seconds : float, default 10.0
    flush_rows : int, default 1000
        Buffered results are written when this many seconds have passed or
        this many rows wait, whichever comes first: that bounds the work a
        killed run loses. Each write is one journal file with an fsync, so
        writing rarely keeps the client's share of a small machine low.
    connect_timeout : float, default 30.0
        Seconds allowed to reach ``scheduler`` and to find a worker there.

    Returns
    -------
    SurveySummary
    """
    start = time.perf_counter()
    spec = parse_spec(model) if isinstance(model, str) else model
    if not isinstance(spec, ModelSpec):
        raise TypeError(f"model must be a specification string or ModelSpec, got "
                        f"{type(model).__name__}; for example model='matern32 + matern12'")
    _check_settings(method, clip, batch_size, workers, in_flight, retries)
    if workers is None and not scheduler:
        workers = os.cpu_count() or 1
    config = PipelineConfig(model=spec, method=method, clip=clip, max_clip_iter=max_clip_iter,
                            grid=grid, inducing=inducing)
    with ExitStack() as stack:
        source = stack.enter_context(SurveyInput(input, columns=columns))
        # The cluster comes before the store, so that an unreachable scheduler
        # leaves no empty result file behind.
        client = None
        if scheduler or workers:
            client, used, threads, address = _connect(stack, workers, scheduler, quiet,
                                                      connect_timeout)
            try:  # also proves the workers can run the pipeline at all
                client.run(warm_up, config)
            except Exception as exc:
                raise ClusterError(
                    f"the workers cannot run the survey pipeline ({type(exc).__name__}: {exc});"
                    " check that every worker runs the same environment as this client"
                ) from exc
            if workers_read is None:
                workers_read = not scheduler and source.stored
            if workers_read:
                _check_workers_read(client, source)
        else:
            used, threads, address = 0, 0, "serial"
            warm_up(config)
        store = stack.enter_context(ResultStore(
            out, param_names=param_names(spec), config=config.describe(), resume=resume,
            overwrite=overwrite, model={"spec": spec.text}, flush_seconds=flush_seconds,
            flush_every=flush_rows))
        done = store.done_ids() if resume else set()
        bar = stack.enter_context(tqdm(
            total=source.remaining(done), unit="obj", file=sys.stderr, dynamic_ncols=True,
            disable=quiet or not progress, mininterval=0.5, desc="survey"))
        tally = Tally()
        writer = _Writer(store, IdSet(done), bar, tally)
        batches = (source.stored_batches(int(batch_size), skip=done)
                   if client is not None and workers_read
                   else source.batches(int(batch_size), skip=done))
        if client is None:
            _run_serial(batches, config, writer)
        else:
            _run_distributed(client, batches, config, writer,
                             int(in_flight or 2 * max(threads, 1)), int(retries))
    return tally.summary(out=str(out), skipped=len(done), workers=used, scheduler=address,
                         wall_seconds=time.perf_counter() - start)
