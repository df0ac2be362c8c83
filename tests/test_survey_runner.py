"""Survey runner on dask.distributed (longwave.survey.runner), with real clusters and files.

The reference for every distributed run is the serial in-process run of the
same file: the pipeline is deterministic, so workers must reproduce it
object by object. Cluster components are real: a LocalCluster of worker
processes bound to 127.0.0.1, killed with real signals.
"""

from __future__ import annotations

import os
import signal
import threading
import time

import numpy as np
import pytest
from distributed import Client, LocalCluster
from survey_support import MALFORMED, read_rows, write_test_survey

from longwave.storage import ResultStore
from longwave.survey import PredictionGrid, fit_object, run_survey

N_OBJECTS, N_POINTS = 200, 80
MODEL = "matern32"


@pytest.fixture(scope="module")
def survey(tmp_path_factory):
    path = tmp_path_factory.mktemp("survey") / "survey.h5"
    ids = write_test_survey(path, N_OBJECTS, N_POINTS, seed=11)
    return path, ids


@pytest.fixture(scope="module")
def serial(survey, tmp_path_factory):
    out = tmp_path_factory.mktemp("serial") / "serial.h5"
    summary = run_survey(survey[0], out, model=MODEL, workers=0, progress=False,
                         grid=PredictionGrid(count=16))
    return out, summary, read_rows(out)


@pytest.fixture(scope="module")
def cluster():
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None) as lc, Client(lc) as client:
        yield lc, client


def _assert_same_rows(got: dict, ref: dict):
    assert set(got) == set(ref)
    for oid, r in ref.items():
        g = got[oid]
        assert (g.status, g.method, g.n, g.n_clipped) == (r.status, r.method, r.n, r.n_clipped)
        assert g.params == pytest.approx(r.params, rel=1e-10), oid
        if np.isfinite(r.log_marginal_likelihood):
            assert g.log_marginal_likelihood == pytest.approx(r.log_marginal_likelihood,
                                                              rel=1e-10)


def test_serial_run_records_every_object_once(survey, serial):
    _, summary, rows = serial
    assert set(rows) == set(survey[1])
    assert summary.processed == len(survey[1]) and summary.skipped == 0
    assert summary.by_status["bad_input"] == 4  # MALFORMED minus the sortable one
    assert summary.by_method == {"kalman": len(survey[1]) - 4}
    assert summary.median_fit_seconds > 0


@pytest.mark.parametrize("oid", sorted(MALFORMED))
def test_malformed_objects_recorded_with_reasons(serial, oid):
    _, _, rows = serial
    _t, _y, _e, status, words = MALFORMED[oid]
    assert rows[oid].status == status
    assert words in rows[oid].message


def test_embedded_local_cluster_of_two_workers_matches_serial(survey, serial, tmp_path):
    out = tmp_path / "two.h5"
    summary = run_survey(survey[0], out, model=MODEL, workers=2, batch_size=16,
                         progress=False, grid=PredictionGrid(count=16))
    assert summary.workers == 2 and summary.scheduler == "embedded"
    assert summary.duplicates_dropped == 0
    _assert_same_rows(read_rows(out), serial[2])
    # Predictions travel back with the results: the same grids, once each.
    for oid in ("obj00000", "obj00123"):
        got = ResultStore.read_prediction(out, oid)
        ref = ResultStore.read_prediction(serial[0], oid)
        for a, b in zip(got, ref):
            np.testing.assert_allclose(a, b, rtol=1e-10, atol=1e-12)


def test_stored_prediction_equals_fit_object(survey, serial):
    from longwave.storage import SurveyFile

    with SurveyFile(survey[0]) as sf:
        obj = sf.get("obj00007")
    ref = fit_object(obj.t, obj.y, obj.err, model_spec=MODEL, grid=PredictionGrid(count=16))
    t, mean, std = ResultStore.read_prediction(serial[0], "obj00007")
    np.testing.assert_allclose(mean, ref.prediction.mean, rtol=1e-10)
    np.testing.assert_allclose(std, ref.prediction.std, rtol=1e-10)


def test_tasks_in_flight_stay_bounded(survey, serial, cluster, tmp_path):
    lc, client = cluster
    seen = []
    done = threading.Event()

    def watch():
        # Tasks the scheduler holds, sampled while the run goes on.
        while not done.is_set():
            seen.append(client.run_on_scheduler(lambda dask_scheduler: len(dask_scheduler.tasks)))
            time.sleep(0.02)

    watcher = threading.Thread(target=watch, daemon=True)
    watcher.start()
    try:
        summary = run_survey(survey[0], tmp_path / "bounded.h5", model=MODEL,
                             scheduler=lc.scheduler_address, batch_size=4, in_flight=3,
                             progress=False)
    finally:
        done.set()
        watcher.join()
    assert summary.processed == len(survey[1])
    assert summary.scheduler == lc.scheduler_address
    assert max(seen) <= 3
    assert max(seen) >= 1  # the watcher did see the run


def test_a_killed_worker_is_survived(survey, serial, cluster, tmp_path):
    lc, client = cluster
    pids = client.run(os.getpid)
    killed = {}

    def kill_when_busy():
        # Kill (SIGKILL) a worker while it is fitting a batch.
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            busy = {w: tasks for w, tasks in client.processing().items() if tasks}
            if busy:
                worker = sorted(busy)[0]
                killed.update(worker=worker, pid=pids[worker], tasks=busy[worker])
                os.kill(pids[worker], signal.SIGKILL)
                return
            time.sleep(0.01)

    killer = threading.Thread(target=kill_when_busy, daemon=True)
    killer.start()
    out = tmp_path / "killed.h5"
    summary = run_survey(survey[0], out, model=MODEL, scheduler=lc.scheduler_address,
                         batch_size=20, retries=2, progress=False, quiet=True,
                         grid=PredictionGrid(count=16))
    killer.join()
    assert killed, "the worker was never seen busy"
    assert killed["tasks"]  # it held a batch when it died
    with pytest.raises(ProcessLookupError):
        os.kill(killed["pid"], 0)
    assert summary.processed == len(survey[1])
    _assert_same_rows(read_rows(out), serial[2])
    # The nanny restarts the worker, so the cluster is whole for the next test.
    client.wait_for_workers(2, timeout=60)


def test_resume_skips_stored_ids_and_writes_nothing_twice(survey, serial, tmp_path):
    from longwave.storage import SurveyFile

    out = tmp_path / "resumed.h5"
    with SurveyFile(survey[0]) as sf:
        first = set(sf.ids[:60].tolist())
    # A first run that stopped early: write the first 60 objects' serial rows.
    ref = serial[2]
    with ResultStore(out, param_names=list(ResultStore.read(serial[0]).param_names),
                     config=ResultStore.read(serial[0]).config,
                     model=ResultStore.read(serial[0]).model) as store:
        for oid in sorted(first):
            store.append(ref[oid])
    summary = run_survey(survey[0], out, model=MODEL, workers=0, resume=True, progress=False,
                         grid=PredictionGrid(count=16))
    assert summary.skipped == 60
    assert summary.processed == len(survey[1]) - 60
    _assert_same_rows(read_rows(out), ref)


def test_resume_with_other_settings_is_refused(survey, serial, tmp_path):
    with pytest.raises(ValueError, match="config must match"):
        run_survey(survey[0], serial[0], model=MODEL, workers=0, resume=True,
                   progress=False, clip=3.0, grid=PredictionGrid(count=16))


@pytest.mark.parametrize("kwargs, words", [
    ({"method": "fastest"}, "unknown inference method"),
    ({"batch_size": 0}, "batch_size must be a whole number >= 1"),
    ({"workers": -1}, "workers must be a whole number >= 0"),
    ({"model": "matern32(scale=)"}, "expected a number"),
])
def test_bad_settings_fail_before_any_work(survey, tmp_path, kwargs, words):
    args = {"model": MODEL, "workers": 0, "progress": False, **kwargs}
    with pytest.raises(ValueError, match=words.replace("(", r"\(")):
        run_survey(survey[0], tmp_path / "never.h5", **args)
    assert not (tmp_path / "never.h5").exists()


def test_unreachable_scheduler_explains_the_fix(survey, tmp_path):
    from survey_support import free_port

    with pytest.raises(ValueError, match="dask scheduler --host 127.0.0.1"):
        run_survey(survey[0], tmp_path / "r.h5", model=MODEL, progress=False,
                   scheduler=f"tcp://127.0.0.1:{free_port()}", connect_timeout=2.0)
    assert not (tmp_path / "r.h5").exists()


def test_a_cluster_that_cannot_run_tasks_stops_the_run(tmp_path):
    from longwave.survey.runner import ClusterError

    # Workers whose task function is a broken stand-in (put in place by a
    # worker preload): every task raises, which must stop the run, not be
    # recorded as a survey of failed objects.
    preload = tmp_path / "break_pipeline.py"
    preload.write_text("import longwave.survey.pipeline as pipeline\n\n\n"
                       "def fit_batch(*args, **kwargs):\n"
                       "    raise ImportError('stand-in: this worker cannot fit')\n\n\n"
                       "pipeline.fit_batch = fit_batch\n")
    path = tmp_path / "tiny.h5"
    write_test_survey(path, 4, 20, malformed=False)
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None, preload=[str(preload)]) as lc:
        with pytest.raises(ClusterError, match="before any succeeded"):
            run_survey(path, tmp_path / "r.h5", model=MODEL, scheduler=lc.scheduler_address,
                       batch_size=2, retries=0, progress=False, quiet=True)
    assert len(ResultStore.read(tmp_path / "r.h5")) == 0


def test_the_writer_drops_a_result_for_an_id_already_written(tmp_path):
    # The client-side guard behind "no result is written twice" (runner._Writer),
    # fed the same batch twice as a resubmitted task could deliver it.
    from longwave.survey.idset import IdSet
    from longwave.survey.runner import _Writer
    from longwave.survey.summary import Tally

    fits = [fit_object([0.0, 1.0, 2.0, 3.0], [0.1, 0.5, 0.2, 0.4], 0.1, model_spec=MODEL,
                       id=f"o{k}") for k in range(3)]
    tally = Tally()

    class Bar:
        n = 0

        def update(self, k):
            self.n += k

    with ResultStore(tmp_path / "w.h5", param_names=["matern32.amplitude", "matern32.scale",
                                                     "mean", "excess_noise"]) as store:
        writer = _Writer(store, IdSet(), Bar(), tally)
        writer.consume(fits)
        writer.consume(fits[1:])
    assert tally.duplicates == 2 and tally.count == 3
    assert sorted(read_rows(tmp_path / "w.h5")) == ["o0", "o1", "o2"]


def _worker_environment():
    return {k: os.environ.get(k) for k in
            ("MALLOC_TRIM_THRESHOLD_", "OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS",
             "NUMBA_NUM_THREADS")}


def test_embedded_workers_run_one_thread_and_keep_glibc_adaptive(monkeypatch):
    # dask's nanny sets MALLOC_TRIM_THRESHOLD_=65536 by default (its
    # distributed.nanny.pre-spawn-environ), which fixes glibc's thresholds; the
    # embedded cluster drops it and keeps the one-thread settings. The nanny
    # copies its settings into this process's environment, which the workers
    # inherit, so a cluster started earlier in this process is undone first.
    from longwave.survey.runner import embedded_cluster

    monkeypatch.delenv("MALLOC_TRIM_THRESHOLD_", raising=False)
    with embedded_cluster(1, quiet=True) as lc, Client(lc) as client:
        (env,) = client.run(_worker_environment).values()
    assert env == {"MALLOC_TRIM_THRESHOLD_": None, "OMP_NUM_THREADS": "1",
                   "OPENBLAS_NUM_THREADS": "1", "NUMBA_NUM_THREADS": "1"}
