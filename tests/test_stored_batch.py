"""Workers reading their own batches (storage.stored_batch; runner ``workers_read``).

References: the client-side reader ``SurveyFile.iter_batches`` (itself
checked against the arrays written, in test_storage_survey.py) for the
objects, and a run that ships the data for the survey results. Cluster
components are real: a LocalCluster of two worker processes on 127.0.0.1.
"""

from __future__ import annotations

import h5py
import numpy as np
import pytest
from distributed import LocalCluster
from survey_support import read_rows, write_test_survey

from longwave.storage import LayoutError, SurveyFile, write_survey
from longwave.storage.stored_batch import StoredBatch, position_runs
from longwave.survey import run_survey


@pytest.fixture
def survey_with_meta(tmp_path, rng):
    path = tmp_path / "meta.h5"
    ids = [f"star{k:03d}" for k in range(30)]
    times = [np.sort(rng.uniform(0, 50, 5 + k)) for k in range(30)]
    values = [rng.standard_normal(t.size) for t in times]
    errors = [rng.uniform(0.1, 0.2, t.size) for t in times]
    meta = {"band": [("g", "r", "i")[k % 3] for k in range(30)],
            "magnitude": rng.uniform(14, 19, 30)}
    write_survey(path, ids, times, values, errors, meta)
    return path, ids


def _same_objects(got, ref):
    assert [o.id for o in got] == [o.id for o in ref]
    for g, r in zip(got, ref):
        np.testing.assert_array_equal(g.t, r.t)
        np.testing.assert_array_equal(g.y, r.y)
        np.testing.assert_array_equal(g.err, r.err)
        assert g.meta == r.meta


def test_stored_batches_read_the_objects_the_client_would(survey_with_meta):
    path, ids = survey_with_meta
    skip = {ids[3], ids[4], ids[17], ids[29]}  # gaps split batches into several runs
    with SurveyFile(path) as sf:
        ref = list(sf.iter_batches(7, skip=skip))
        refs = list(sf.iter_stored_batches(7, skip=skip))
    assert [len(b) for b in refs] == [len(b) for b in ref]
    assert any(len(b.runs) > 1 for b in refs)
    for stored, batch in zip(refs, ref):
        _same_objects(stored.read(), batch)
    # one-object pieces cover the same objects, in order
    pieces = [p for b in refs for p in b.split()]
    assert all(len(p) == 1 for p in pieces)
    _same_objects([p.read()[0] for p in pieces], [o for b in ref for o in b])


def test_position_runs_group_consecutive_positions():
    assert position_runs([2, 3, 4, 7, 9, 10]) == ((2, 5), (7, 8), (9, 11))
    assert position_runs([]) == ()


def test_a_file_that_changed_under_a_batch_is_reported(survey_with_meta):
    path, ids = survey_with_meta
    batch = StoredBatch(str(path), ((0, 2),), (ids[0], "someone-else"))
    with pytest.raises(LayoutError, match="someone-else"):
        batch.read()


def test_a_batch_is_a_few_hundred_bytes_whatever_the_objects(survey_with_meta):
    import pickle

    path, _ = survey_with_meta
    with SurveyFile(path) as sf:
        stored = next(sf.iter_stored_batches(30))
        shipped = next(sf.iter_batches(30))
    assert len(pickle.dumps(stored)) < len(pickle.dumps(shipped)) / 4


@pytest.fixture(scope="module")
def two_workers():
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None) as lc:
        yield lc


def test_workers_reading_the_file_give_the_rows_of_shipped_data(tmp_path, two_workers):
    survey = tmp_path / "s.h5"
    write_test_survey(survey, 60, 40, seed=5)
    address = two_workers.scheduler_address
    shipped = run_survey(survey, tmp_path / "shipped.h5", scheduler=address, batch_size=8,
                         workers_read=False, progress=False)
    read = run_survey(survey, tmp_path / "read.h5", scheduler=address, batch_size=8,
                      workers_read=True, progress=False)
    assert read.processed == shipped.processed == 60 + 5  # five malformed objects added
    a, b = read_rows(tmp_path / "read.h5"), read_rows(tmp_path / "shipped.h5")
    assert set(a) == set(b)
    for oid, r in b.items():
        assert (a[oid].status, a[oid].params) == (r.status, r.params)


def test_workers_read_needs_a_survey_file(tmp_path, two_workers):
    table = tmp_path / "t.csv"
    table.write_text("id,time,value,error\na,0,1,0.1\na,1,2,0.1\n")
    with pytest.raises(ValueError, match="long table"):
        run_survey(table, tmp_path / "o.h5", scheduler=two_workers.scheduler_address,
                   workers_read=True, progress=False)


def test_workers_that_cannot_open_the_file_stop_the_run_early(tmp_path, two_workers,
                                                              monkeypatch):
    from longwave.survey import runner

    survey = tmp_path / "s.h5"
    write_test_survey(survey, 10, 20, seed=1, malformed=False)

    def elsewhere(self, batch_size, skip=None):  # a path the workers cannot see
        for b in SurveyFile(survey).iter_stored_batches(batch_size, skip):
            yield StoredBatch(str(tmp_path / "not-here.h5"), b.runs, b.ids)

    monkeypatch.setattr(runner.SurveyInput, "stored_batches", elsewhere)
    with pytest.raises(runner.ClusterError, match="cannot read"):
        run_survey(survey, tmp_path / "o.h5", scheduler=two_workers.scheduler_address,
                   workers_read=True, progress=False)
    assert not (tmp_path / "o.h5").exists()
    assert h5py.is_hdf5(survey)
