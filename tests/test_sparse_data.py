"""Data sources of the sparse methods: ChunkedSeries over arrays, memory maps, HDF5.

Source: the statistics are sums over points (``sparse_stats``), so any
source giving the same points must give the same result as a ``Series``
(common practice); h5py datasets are sliced as numpy arrays are (h5py docs).
"""

from __future__ import annotations

import pickle

import h5py
import numpy as np
import pytest
from conftest import make_series

from longwave import Model
from longwave.kernels import Matern32
from longwave.methods import FITC, VFE, ChunkedSeries


@pytest.fixture
def case(rng):
    series = make_series(rng, 500, step=0.3)
    model = Model(Matern32(amplitude=1.0, scale=3.0), mean=0.1, excess_noise=0.05)
    z = np.linspace(series.t[0], series.t[-1], 30)
    return series, model, z


def _same(a, b):
    assert a.value == pytest.approx(b.value, rel=1e-10)
    np.testing.assert_allclose(a.grad, b.grad, rtol=1e-10, atol=1e-10 * np.abs(b.grad).max())


@pytest.mark.parametrize("cls", [VFE, FITC])
def test_memmap_and_hdf5_sources_equal_the_series(cls, case, tmp_path):
    series, model, z = case
    method = cls(inducing=z, chunk=64)
    ref = method.evaluate(model, series, gradient=True)
    for name, arr in (("t", series.t), ("y", series.y), ("err", series.err)):
        np.save(tmp_path / f"{name}.npy", arr)
    mm = [np.load(tmp_path / f"{n}.npy", mmap_mode="r") for n in ("t", "y", "err")]
    _same(method.evaluate(model, ChunkedSeries(*mm), gradient=True), ref)
    with h5py.File(tmp_path / "s.h5", "w") as f:
        for name, arr in (("t", series.t), ("y", series.y), ("err", series.err)):
            f.create_dataset(name, data=arr, chunks=(100,))
    with h5py.File(tmp_path / "s.h5", "r") as f:
        source = ChunkedSeries(f["t"], f["y"], f["err"])
        _same(method.evaluate(model, source, gradient=True), ref)
        p = method.posterior(model, source).predict(series.t[:20])
    q = method.posterior(model, series).predict(series.t[:20])
    np.testing.assert_allclose(p.mean, q.mean, rtol=1e-10, atol=1e-12)


def test_memmap_pickles_as_its_file_name(case, tmp_path):
    series, _, _ = case
    np.save(tmp_path / "t.npy", np.tile(series.t, 20))
    mm = np.load(tmp_path / "t.npy", mmap_mode="r")
    source = ChunkedSeries(mm, mm, 0.1)
    blob = pickle.dumps(source)
    assert len(blob) < 2000 < mm.nbytes  # the data did not travel
    back = pickle.loads(blob)
    np.testing.assert_array_equal(back.read(5, 9)[0], mm[5:9])


def test_reader_source_and_scalar_err(case):
    series, model, z = case
    ref = VFE(inducing=z).evaluate(model, series.subset(np.arange(series.n)), gradient=True)

    def reader(lo, hi):
        return series.t[lo:hi], series.y[lo:hi], series.err[lo:hi]

    _same(VFE(inducing=z, chunk=50).evaluate(
        model, ChunkedSeries.from_reader(reader, series.n), gradient=True), ref)
    const = ChunkedSeries(series.t, series.y, 0.2)
    assert np.all(const.read(0, 4)[2] == 0.2)


def test_bad_values_are_reported_by_global_index(case):
    series, model, z = case
    y = series.y.copy()
    y[377] = np.nan
    with pytest.raises(ValueError, match="index 377"):
        VFE(inducing=z, chunk=100).evaluate(model, ChunkedSeries(series.t, y, series.err))
    err = series.err.copy()
    err[12] = -1.0
    with pytest.raises(ValueError, match="err must be positive and finite, found -1.0 at index 12"):
        VFE(inducing=z).evaluate(model, ChunkedSeries(series.t, series.y, err))
    with pytest.raises(ValueError, match="equal length"):
        ChunkedSeries(series.t, series.y[:-1])
