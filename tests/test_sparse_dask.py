"""The distributed sparse path on a real dask.distributed LocalCluster.

Source: the passes are sums over disjoint ranges (``sparse_stats``), so the
map-reduce must equal the local pass up to the order of floating-point
additions (common practice); HDF5 read through a picklable reader that
opens the file on the worker (h5py docs: datasets are not picklable).
"""

from __future__ import annotations

import h5py
import numpy as np
import pytest
from conftest import make_series

from longwave import Model
from longwave.kernels import Matern12, Matern32
from longwave.methods import FITC, VFE, ChunkedSeries

distributed = pytest.importorskip("distributed")


class H5Reader:
    """Opens the file by name at each call, so it pickles to any worker."""

    def __init__(self, path):
        self.path = str(path)

    def __call__(self, lo, hi):
        with h5py.File(self.path, "r") as f:
            return f["t"][lo:hi], f["y"][lo:hi], f["err"][lo:hi]


@pytest.fixture(scope="module")
def client():
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       host="127.0.0.1", dashboard_address="127.0.0.1:0")
    with distributed.Client(cluster) as c:
        yield c
    cluster.close()


@pytest.mark.slow
@pytest.mark.parametrize("cls", [VFE, FITC])
def test_distributed_equals_local(cls, client, tmp_path):
    rng = np.random.default_rng(11)
    series = make_series(rng, 3000, step=0.2)
    model = Model(Matern32(amplitude=1.0, scale=3.0) + Matern12(amplitude=0.3, scale=1.0),
                  mean=0.2, excess_noise=0.05)
    z = np.linspace(series.t[0], series.t[-1], 40)
    local = cls(inducing=z, chunk=256).evaluate(model, series, gradient=True)
    for name, arr in (("t", series.t), ("y", series.y), ("err", series.err)):
        np.save(tmp_path / f"{name}.npy", arr)
    with h5py.File(tmp_path / "s.h5", "w") as f:
        for name, arr in (("t", series.t), ("y", series.y), ("err", series.err)):
            f.create_dataset(name, data=arr)
    sources = [
        ChunkedSeries(*[np.load(tmp_path / f"{n}.npy", mmap_mode="r") for n in ("t", "y", "err")]),
        ChunkedSeries.from_reader(H5Reader(tmp_path / "s.h5"), series.n),
    ]
    for source in sources:
        method = cls(inducing=z, chunk=256, client=client, task_size=700)
        dist = method.evaluate(model, source, gradient=True)
        assert dist.value == pytest.approx(local.value, rel=1e-10)
        np.testing.assert_allclose(dist.grad, local.grad, rtol=1e-9,
                                   atol=1e-10 * np.abs(local.grad).max())
        for key in ("lower_bound", "upper_bound"):
            assert dist.extras[key] == pytest.approx(local.extras[key], rel=1e-10)


@pytest.mark.slow
def test_unpicklable_source_is_refused_with_the_fix(client, tmp_path):
    with h5py.File(tmp_path / "s.h5", "w") as f:
        f.create_dataset("t", data=np.arange(10.0))
    with h5py.File(tmp_path / "s.h5", "r") as f:
        source = ChunkedSeries(f["t"], f["t"], 0.1)
        with pytest.raises(TypeError, match="from_reader"):
            VFE(inducing=4, client=client).evaluate(Model(Matern32(amplitude=1.0, scale=2.0)),
                                                    source)
