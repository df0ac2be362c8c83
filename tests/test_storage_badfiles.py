"""Bad files: truncated, corrupt, missing datasets, wrong dtypes, duplicated ids.

Correctness source: docs/layouts.md (what a valid file holds) and common
practice for error reporting (name the file and the dataset; list valid
choices as h5py does). Every case also checks that an existing result file
is left byte-for-byte unchanged.
"""

from __future__ import annotations

import subprocess
import sys

import h5py
import numpy as np
import pytest

from longwave.storage import LayoutError, ObjectResult, ResultStore, SurveyFile, write_survey


@pytest.fixture
def survey(tmp_path, rng):
    path = tmp_path / "survey.h5"
    ids = [f"s{i}" for i in range(60)]
    times = [np.sort(rng.uniform(0, 100, 500)) for _ in ids]
    write_survey(path, ids, times, [rng.normal(size=500) for _ in ids],
                 [rng.uniform(0.1, 0.2, 500) for _ in ids])
    return path


@pytest.fixture
def store(tmp_path):
    path = tmp_path / "results.h5"
    with ResultStore(path, ["scale"], {"k": 1}, flush_every=2) as st:
        for i in range(5):
            st.append(ObjectResult(id=f"s{i}", status="ok", params={"scale": float(i)}))
    return path


def _rewrite(path, edit):
    with h5py.File(path, "r+") as f:
        edit(f)


def test_truncated_survey(survey):
    data = survey.read_bytes()
    survey.write_bytes(data[: len(data) // 2])
    with pytest.raises(LayoutError, match=r"survey.h5: cannot be opened as HDF5.*truncated"):
        SurveyFile(survey)


def test_not_hdf5_at_all(tmp_path):
    path = tmp_path / "notes.h5"
    path.write_text("id,time,value\n")
    with pytest.raises(LayoutError, match="notes.h5: cannot be opened as HDF5"):
        SurveyFile(path)


def test_corrupt_chunk_names_the_dataset(survey):
    with h5py.File(survey, "r") as f:
        info = f["value"].id.get_chunk_info(0)
    data = bytearray(survey.read_bytes())
    data[info.byte_offset + 64: info.byte_offset + 128] = bytes(64)
    survey.write_bytes(bytes(data))
    with SurveyFile(survey) as sf:
        with pytest.raises(LayoutError, match=r"survey.h5, dataset '/value': cannot be read"):
            sf[0]


@pytest.mark.parametrize("name", ["time", "value", "error", "offsets", "ids"])
def test_missing_survey_dataset(survey, name):
    _rewrite(survey, lambda f: f.__delitem__(name))
    with pytest.raises(LayoutError, match=rf"survey.h5, dataset '/{name}': is missing"):
        SurveyFile(survey)


@pytest.mark.parametrize("name, data, match", [
    ("time", np.zeros(30000, dtype=np.int64), "must be one of float32, float64, got int64"),
    ("ids", np.arange(60), "must be one of string, got int64"),
    ("offsets", np.zeros(61), "must be one of int8, .*, got float64"),
])
def test_wrong_survey_dtype(survey, name, data, match):
    def edit(f):
        del f[name]
        f[name] = data
    _rewrite(survey, edit)
    with pytest.raises(LayoutError, match=rf"dataset '/{name}': dtype {match}"):
        SurveyFile(survey)


def test_inconsistent_offsets(survey):
    def edit(f):
        f["offsets"][5] = 10**9
    _rewrite(survey, edit)
    with pytest.raises(LayoutError, match=r"'/offsets': must rise from 0"):
        SurveyFile(survey)


def test_wrong_format_attribute(survey, store):
    with pytest.raises(LayoutError, match=r"longwave_format must be 'survey', got 'results'"):
        SurveyFile(store)
    _rewrite(survey, lambda f: f.attrs.__setitem__("format_version", 7))
    with pytest.raises(LayoutError, match=r"format_version must be one of \[1\], got 7"):
        SurveyFile(survey)


def test_duplicated_ids_in_a_stored_survey(survey):
    _rewrite(survey, lambda f: f["ids"].__setitem__(7, "s3"))
    with pytest.raises(LayoutError, match=r"'/ids': ids must be unique, 's3' appears at "
                                          r"positions \[3, 7\]"):
        SurveyFile(survey)


# --- result stores: each failure leaves the file byte-for-byte as it was -----
def _snapshot(path):
    journal = path.with_name(path.name + ".journal")
    parts = sorted(p.name for p in journal.iterdir()) if journal.exists() else []
    return path.read_bytes(), parts


def _refuse_resume(path, match):
    before = _snapshot(path)
    with pytest.raises(LayoutError, match=match):
        ResultStore(path, ["scale"], {"k": 1}, resume=True)
    with pytest.raises(LayoutError, match=match):
        ResultStore.read(path)
    assert _snapshot(path) == before


def test_truncated_result_store(store):
    store.write_bytes(store.read_bytes()[:1000])
    _refuse_resume(store, r"results.h5: cannot be opened as HDF5")


def test_missing_result_column(store):
    _rewrite(store, lambda f: f["results"].__delitem__("runtime"))
    _refuse_resume(store, r"results.h5, dataset '/results/runtime': is missing")


def test_wrong_result_dtype(store):
    def edit(f):
        del f["results/n"]
        f["results/n"] = np.zeros(5)
    _rewrite(store, edit)
    _refuse_resume(store, r"'/results/n': dtype must be one of int8, .*, got float64")


def test_duplicated_result_ids(store):
    _rewrite(store, lambda f: f["results/id"].__setitem__(4, "s1"))
    _refuse_resume(store, r"'/results/id': ids must be unique, 's1' appears 2 times")


def test_corrupt_journal_part_names_the_part(tmp_path):
    path = tmp_path / "results.h5"
    # A writer that flushes one part and dies without closing (os._exit skips close).
    code = ("import os; from longwave.storage import ObjectResult, ResultStore; "
            f"st = ResultStore({str(path)!r}, ['scale'], {{'k': 1}}, flush_every=1); "
            "st.append(ObjectResult(id='a', status='ok')); os._exit(0)")
    subprocess.run([sys.executable, "-c", code], check=True, timeout=60)
    part = next((tmp_path / "results.h5.journal").iterdir())
    part.write_bytes(part.read_bytes()[:300])
    _refuse_resume(path, r"part-0000000001.h5: cannot be opened as HDF5")


def test_failed_append_leaves_store_unchanged(store):
    before = _snapshot(store)
    with ResultStore(store, ["scale"], {"k": 1}, resume=True) as st:
        with pytest.raises(ValueError, match="already in"):
            st.append(ObjectResult(id="s2", status="ok"))
        with pytest.raises(TypeError, match="ObjectResult"):
            st.append({"id": "x"})
    assert _snapshot(store) == before
