"""Survey files: write from arrays, read by index, id and batch (layout: docs/layouts.md).

Correctness source: the arrays written are the reference ("round trip",
common practice for storage formats); h5py reads the raw datasets to check
the documented layout independently of our reader.
"""

from __future__ import annotations

import h5py
import numpy as np
import pytest

from longwave.storage import ObjectData, SurveyFile, SurveyWriter, write_survey


def _survey(rng, m, *, with_err=True, max_n=40):
    ids = [f"obj-{i:04d}" for i in range(m)]
    lengths = rng.integers(0, max_n, m)  # zero-length objects are allowed
    times = [np.sort(rng.uniform(5e4, 6e4, k)) for k in lengths]
    values = [rng.normal(18.0, 0.5, k) for k in lengths]
    errors = [rng.uniform(0.01, 0.2, k) for k in lengths] if with_err else None
    meta = {"ra": rng.uniform(0, 360, m), "field": np.array([f"F{i % 3}" for i in range(m)]),
            "n_nights": rng.integers(1, 90, m), "variable": rng.random(m) < 0.5}
    return ids, times, values, errors, meta


@pytest.mark.parametrize("with_err", [True, False])
def test_round_trip_by_index_id_and_batch(tmp_path, rng, with_err):
    ids, times, values, errors, meta = _survey(rng, 57, with_err=with_err)
    path = tmp_path / "survey.h5"
    write_survey(path, ids, times, values, errors, meta)
    with SurveyFile(path) as sf:
        assert len(sf) == 57 and sf.ids.dtype.kind == "U"
        assert sf.ids.tolist() == ids
        for i in (0, 13, 56, -1):
            obj = sf[i]
            j = i % 57
            assert isinstance(obj, ObjectData) and obj.id == ids[j]
            np.testing.assert_array_equal(obj.t, times[j])
            np.testing.assert_array_equal(obj.y, values[j])
            if with_err:
                np.testing.assert_array_equal(obj.err, errors[j])
            else:
                assert obj.err is None
            assert obj.meta == {"ra": meta["ra"][j], "field": meta["field"][j],
                                "n_nights": meta["n_nights"][j], "variable": meta["variable"][j]}
        obj = sf.get("obj-0042")
        np.testing.assert_array_equal(obj.y, values[42])
        skip = {"obj-0000", "obj-0005", "obj-0006", "obj-0030"}
        batches = list(sf.iter_batches(batch_size=8, skip=skip))
        assert all(len(b) <= 8 for b in batches)
        seen = [o.id for b in batches for o in b]
        assert seen == [s for s in ids if s not in skip]
        for o in (o for b in batches for o in b):
            np.testing.assert_array_equal(o.t, times[ids.index(o.id)])


def test_documented_layout_with_raw_h5py(tmp_path, rng):
    ids, times, values, errors, _ = _survey(rng, 5)
    path = tmp_path / "s.h5"
    write_survey(path, ids, times, values, errors)
    with h5py.File(path, "r") as f:
        assert f.attrs["longwave_format"] == "survey" and f.attrs["format_version"] == 1
        off = f["offsets"][:]
        assert off[0] == 0 and off[-1] == f["time"].shape[0] == sum(map(len, times))
        np.testing.assert_array_equal(f["value"][off[3]:off[4]], values[3])
        assert f["time"].chunks is not None and f["time"].compression == "gzip"
        assert f["time"].maxshape == (None,)


def test_lookup_errors_name_the_file(tmp_path, rng):
    ids, times, values, errors, _ = _survey(rng, 3)
    path = tmp_path / "s.h5"
    write_survey(path, ids, times, values, errors)
    with SurveyFile(path) as sf:
        with pytest.raises(KeyError, match="nope.*s.h5"):
            sf.get("nope")
        with pytest.raises(IndexError):
            sf[3]
        with pytest.raises(TypeError, match="get"):
            sf["obj-0000"]


def test_duplicate_ids_refused_and_existing_file_unchanged(tmp_path, rng):
    path = tmp_path / "s.h5"
    write_survey(path, ["a"], [np.arange(3.0)], [np.ones(3)])
    before = path.read_bytes()
    with pytest.raises(ValueError, match=r"'b' appears twice \(objects 1 and 2\)"):
        write_survey(path, ["a", "b", "b"], [np.arange(2.0)] * 3, [np.ones(2)] * 3,
                     overwrite=True)
    assert path.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["s.h5"]  # no temporary left


def test_refuses_to_overwrite_without_flag(tmp_path):
    path = tmp_path / "s.h5"
    write_survey(path, ["a"], [[1.0]], [[2.0]])
    with pytest.raises(FileExistsError, match="overwrite=True"):
        write_survey(path, ["a"], [[1.0]], [[2.0]])


@pytest.mark.parametrize("bad, match", [
    ({"t": np.zeros(3), "y": np.zeros(2)}, "equal length"),
    ({"t": np.zeros((2, 2)), "y": np.zeros(4)}, "1-D"),
    ({"t": ["x", "y"], "y": np.zeros(2)}, "numeric"),
])
def test_writer_rejects_malformed_objects(tmp_path, bad, match):
    with pytest.raises(ValueError, match=match):
        with SurveyWriter(tmp_path / "s.h5", has_err=False) as w:
            w.add("a", bad["t"], bad["y"])
    assert not (tmp_path / "s.h5").exists()


def test_writer_streams_beyond_its_buffer(tmp_path, rng):
    # buffer_points=50 forces many partial writes; the result must be identical.
    ids, times, values, errors, _ = _survey(rng, 40)
    with SurveyWriter(tmp_path / "s.h5", has_err=True, buffer_points=50) as w:
        for i, t, y, e in zip(ids, times, values, errors):
            w.add(i, t, y, e)
    with SurveyFile(tmp_path / "s.h5") as sf:
        for j in (0, 17, 39):
            np.testing.assert_array_equal(sf[j].err, errors[j])
        np.testing.assert_array_equal(sf.n_points, [len(t) for t in times])
