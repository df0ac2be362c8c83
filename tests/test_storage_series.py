"""Long single series in HDF5 and chunked prediction grids.

Correctness sources: ``numpy.linspace`` for the uniform grid (chunks must
equal it exactly); the in-memory ``Posterior.predict`` for chunked
predictions (queries are independent, so results must agree exactly);
round trips against the written arrays (common practice).
"""

from __future__ import annotations

import h5py
import numpy as np
import pytest

import longwave as lw
from longwave.kernels import Matern32
from longwave.storage import (
    Grid,
    LayoutError,
    SeriesWriter,
    SurveyFile,
    open_series,
    predict_to_hdf5,
    read_grid,
    write_series,
    write_survey,
)


def _data(rng, n=5000):
    t = np.cumsum(rng.exponential(1.0, n)) + 2.46e6
    return t, np.sin(t / 30.0) + 0.1 * rng.standard_normal(n), rng.uniform(0.05, 0.2, n)


@pytest.mark.parametrize("chunk", [1000, 4096, None])
def test_series_round_trip_in_chunks(tmp_path, rng, chunk):
    t, y, e = _data(rng)
    path = tmp_path / "long.h5"
    write_series(path, t, y, e, chunk=777)
    with open_series(path) as sd:
        assert sd.n == 5000 and sd.has_err
        assert isinstance(sd.time, h5py.Dataset)
        sizes = [c[0].size for c in sd.iter_chunks(chunk)]
        assert sum(sizes) == 5000 and max(sizes) <= (chunk or 5000)
        got = np.concatenate([c[1] for c in sd.iter_chunks(chunk)])
        np.testing.assert_array_equal(got, y)
        tt, yy, ee = sd.read(chunk)
        np.testing.assert_array_equal(tt, t)
        np.testing.assert_array_equal(ee, e)
        s = sd.to_series()
        np.testing.assert_array_equal(s.y, lw.Series(t, y, e).y)


def test_writer_records_sortedness(tmp_path):
    with SeriesWriter(tmp_path / "a.h5", has_err=False) as w:
        w.append([1.0, 2.0], [0.0, 0.0])
        w.append([2.0, 5.0], [0.0, 0.0])
    with SeriesWriter(tmp_path / "b.h5", has_err=False) as w:
        w.append([1.0, 3.0], [0.0, 0.0])
        w.append([2.0], [0.0])
    with h5py.File(tmp_path / "a.h5") as fa, h5py.File(tmp_path / "b.h5") as fb:
        assert fa.attrs["sorted"] and not fb.attrs["sorted"]
        assert fa.attrs["longwave_format"] == "series" and fa["time"].shape == (4,)


def test_survey_object_as_series_dataset(tmp_path, rng):
    t, y, e = _data(rng, 300)
    write_survey(tmp_path / "s.h5", ["a", "b", "c"], [t[:100], t[100:250], t[250:]],
                 [y[:100], y[100:250], y[250:]], [e[:100], e[100:250], e[250:]])
    with SurveyFile(tmp_path / "s.h5") as sf:
        sd = sf.series_dataset("b")
        assert sd.n == 150
        np.testing.assert_array_equal(np.concatenate([c[0] for c in sd.iter_chunks(40)]),
                                      t[100:250])


def test_bad_series_file(tmp_path, rng):
    t, y, e = _data(rng, 100)
    write_series(tmp_path / "s.h5", t, y, e)
    with h5py.File(tmp_path / "s.h5", "r+") as f:
        del f["value"]
        f["value"] = np.zeros(100, dtype=np.int32)
    with pytest.raises(LayoutError, match=r"s.h5, dataset '/value': dtype must be one of "
                                          r"float32, float64, got int32"):
        open_series(tmp_path / "s.h5")


@pytest.mark.parametrize("start, stop, n", [
    (0.0, 1.0, 11), (2.46e6, 2.46e6 + 1e4, 100_003), (5.0, 5.0, 7), (3.0, -1.0, 2),
    (1.0, 9.0, 1),
])
def test_grid_chunks_equal_numpy_linspace(start, stop, n):
    grid = Grid(start, stop, n)
    ref = np.linspace(start, stop, n)
    cuts = sorted({0, n, n // 3, n // 2, max(n - 1, 0)})
    got = np.concatenate([grid.chunk(a, b) for a, b in zip(cuts[:-1], cuts[1:])])
    np.testing.assert_array_equal(got, ref)


def test_grid_rejects_bad_specs():
    with pytest.raises(ValueError, match="whole number >= 1, got 0"):
        Grid(0.0, 1.0, 0)
    with pytest.raises(ValueError, match="finite"):
        Grid(0.0, np.inf, 3)


@pytest.fixture
def posterior(rng):
    t, y, e = _data(rng, 2000)
    model = lw.Model(Matern32(amplitude=1.0, scale=30.0), mean=0.0)
    return lw.posterior(model, lw.Series(t, y, e))


class _Recording:
    """Wraps a posterior and records the size of every predict call."""

    def __init__(self, inner):
        self.inner, self.sizes = inner, []

    def predict(self, t, **options):
        self.sizes.append(t.size)
        return self.inner.predict(t, **options)


@pytest.mark.parametrize("observed", [False, True])
def test_uniform_grid_to_file_matches_in_memory_predict(tmp_path, posterior, observed):
    t0, t1 = posterior.series.t[0] - 50.0, posterior.series.t[-1] + 50.0
    rec = _Recording(posterior)
    n = predict_to_hdf5(rec, (t0, t1, 25_001), tmp_path / "p.h5", chunk=4000,
                        observed=observed)
    assert n == 25_001 and max(rec.sizes) <= 4000 and sum(rec.sizes) == n
    ref = posterior.predict(np.linspace(t0, t1, 25_001), observed=observed)
    with h5py.File(tmp_path / "p.h5") as f:
        assert "t" not in f and f.attrs["grid"] == "uniform" and f.attrs["observed"] == observed
        np.testing.assert_array_equal(f["mean"][:], ref.mean)
        np.testing.assert_array_equal(f["std"][:], ref.std)
    assert read_grid(tmp_path / "p.h5") == Grid(t0, t1, 25_001)


def test_explicit_grid_from_dataset_into_group(tmp_path, posterior, rng):
    tq = rng.uniform(posterior.series.t[0], posterior.series.t[-1], 3001)  # unsorted
    with h5py.File(tmp_path / "out.h5", "w") as f:
        f["queries"] = tq
        g = f.create_group("pred")
        predict_to_hdf5(posterior, f["queries"], g, chunk=1000)
        with pytest.raises(ValueError, match=r"already holds \['mean', 'std', 't'\]"):
            predict_to_hdf5(posterior, tq, g)
    ref = posterior.predict(tq)
    with h5py.File(tmp_path / "out.h5") as f:
        np.testing.assert_array_equal(f["pred/t"][:], tq)
        np.testing.assert_array_equal(f["pred/mean"][:], ref.mean)
        np.testing.assert_array_equal(read_grid(f["pred"]), tq)


def test_existing_prediction_file_needs_overwrite(tmp_path, posterior):
    predict_to_hdf5(posterior, (0.0, 1.0, 3), tmp_path / "p.h5")
    with pytest.raises(FileExistsError, match="overwrite=True"):
        predict_to_hdf5(posterior, (0.0, 1.0, 3), tmp_path / "p.h5")
