"""``fit`` / ``posterior`` with sparse methods: chunked sources and the ``prepare`` hook.

References: the same fit on an in-memory ``Series`` (itself checked against
Exact in test_sparse.py), and greedy placement fixed by hand with
``placed`` before fitting (Burt, Rasmussen & van der Wilk 2020, as
implemented in methods/inducing.py and tested in test_inducing.py).
"""

from __future__ import annotations

import h5py
import numpy as np
import pytest

import longwave as lw
from longwave.kernels import Matern32
from longwave.methods import FITC, VFE, ChunkedSeries


@pytest.fixture
def data(rng):
    t = np.sort(rng.uniform(0, 200, 1500))
    y = 0.8 * np.sin(t / 6.0) + 0.15 * rng.standard_normal(t.size)
    err = rng.uniform(0.1, 0.2, t.size)
    return t, y, err


def _model():
    return lw.Model(Matern32(amplitude=1.0, scale=4.0), mean=0.0, excess_noise=0.02)


@pytest.mark.parametrize("cls", [VFE, FITC])
def test_fit_reads_an_hdf5_chunked_series_like_an_in_memory_one(cls, data, tmp_path):
    t, y, err = data
    path = tmp_path / "series.h5"
    with h5py.File(path, "w") as f:
        for name, arr in (("t", t), ("y", y), ("err", err)):
            f[name] = arr
    method = cls(inducing=np.linspace(0, 200, 40), chunk=256)
    ref = lw.fit(_model(), lw.Series(t, y, err), method=method)
    with h5py.File(path, "r") as f:
        got = lw.fit(_model(), ChunkedSeries(f["t"], f["y"], f["err"]), method=method)
        pred = lw.posterior(got.model, ChunkedSeries(f["t"], f["y"], f["err"]),
                            method=method).predict(np.array([10.0, 150.0]))
    assert got.converged and ref.converged
    np.testing.assert_allclose(got.model.coordinates(), ref.model.coordinates(), rtol=1e-7,
                               atol=1e-8)
    assert got.log_marginal_likelihood == pytest.approx(ref.log_marginal_likelihood, rel=1e-10)
    want = lw.posterior(ref.model, lw.Series(t, y, err), method=method).predict(
        np.array([10.0, 150.0]))
    np.testing.assert_allclose(pred.mean, want.mean, rtol=1e-6)


def test_greedy_placement_is_fixed_once_from_the_initial_model(data):
    t, y, err = data
    series = lw.Series(t, y, err)
    method = VFE(inducing=30, placement="greedy")
    by_hand = lw.fit(_model(), series, method=method.placed(_model(), series))
    through_fit = lw.fit(_model(), series, method=method)
    np.testing.assert_allclose(through_fit.model.coordinates(), by_hand.model.coordinates(),
                               rtol=1e-10)
    # the hook changes nothing for settings that need no fixing
    fixed = VFE(inducing=np.linspace(0, 200, 30))
    assert fixed.prepare(_model(), series) is fixed
    value = lw.log_marginal_likelihood(_model(), series, method=method)
    assert value == method.placed(_model(), series).evaluate(_model(), series).value


def test_a_chunked_series_needs_a_sparse_method(data):
    t, y, err = data
    with pytest.raises(TypeError, match="sparse method"):
        lw.fit(_model(), ChunkedSeries(t, y, err))
    with pytest.raises(TypeError, match="sparse method"):
        lw.log_marginal_likelihood(_model(), ChunkedSeries(t, y, err), method="kalman")
