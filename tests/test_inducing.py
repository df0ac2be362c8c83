"""Inducing-time placement (``methods/inducing.py``).

Sources: quantiles against ``numpy.quantile``; k-means against
scikit-learn's ``KMeans`` run directly; greedy selection against a dense
numpy twin of Burt, Rasmussen & van der Wilk 2020, Algorithm 1 (pick the
largest conditional variance ``k(x, x) - k_xZ Kzz^-1 k_Zx``).
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.cluster import KMeans

from longwave.kernels import Matern32
from longwave.methods import ChunkedSeries
from longwave.methods.inducing import candidate_times, place


def _clustered_times(rng, n=3000):
    return np.sort(np.concatenate([rng.normal(10, 1, n // 3), rng.normal(50, 5, n // 3),
                                   rng.uniform(0, 100, n - 2 * (n // 3))]))


def test_uniform_and_quantile(rng):
    t = _clustered_times(rng)
    src = ChunkedSeries(t, t)
    u = place(src, 10, "uniform")
    np.testing.assert_allclose(u, t.min() + (np.arange(10) + 0.5) * np.ptp(t) / 10)
    q = place(src, 10, "quantile")
    np.testing.assert_allclose(q, np.quantile(t, (np.arange(10) + 0.5) / 10))


def test_kmeans_equals_scikit_learn(rng):
    t = _clustered_times(rng)
    ours = place(ChunkedSeries(t, t), 12, "kmeans", seed=3)
    ref = np.sort(KMeans(n_clusters=12, n_init=1, random_state=3).fit(t.reshape(-1, 1))
                  .cluster_centers_.ravel())
    np.testing.assert_allclose(ours, ref)


def test_greedy_equals_dense_twin(rng):
    t = _clustered_times(rng, 400)
    kernel = Matern32(amplitude=1.0, scale=3.0)
    chosen = []
    for _ in range(15):  # dense twin: conditional variance by a full solve each step
        if chosen:
            kzz = kernel(t[chosen]) + 0.0 * np.eye(len(chosen))
            kxz = kernel(t, t[chosen])
            var = kernel.variance() - np.einsum("ij,ji->i", kxz, np.linalg.solve(kzz, kxz.T))
        else:
            var = np.full(t.size, kernel.variance())
        var[chosen] = -np.inf
        chosen.append(int(np.argmax(var)))
    ours = place(ChunkedSeries(t, t), 15, "greedy", kernel=kernel)
    np.testing.assert_allclose(ours, np.sort(t[chosen]))


def test_greedy_drives_down_the_worst_conditional_variance(rng):
    # source: Burt, Rasmussen & van der Wilk 2020, Alg. 1 adds the worst-explained point each
    # step, so the largest remaining variance k(x, x) - Q(x, x) ends below that of the
    # data-only placements (dense numpy computation of diag(Kff - Q))
    t = _clustered_times(rng, 1500)
    kernel = Matern32(amplitude=1.0, scale=6.0)
    src = ChunkedSeries(t, t)

    def worst(z):
        kzx = kernel(z, t)
        q = np.einsum("ij,ij->j", kzx, np.linalg.solve(kernel(z) + 1e-10 * np.eye(z.size), kzx))
        return np.max(kernel.variance() - q)

    greedy = worst(place(src, 40, "greedy", kernel=kernel))
    # (k-means is not compared: its centres are free to leave the data times, greedy's are not)
    for name in ("uniform", "quantile"):
        assert greedy < worst(place(src, 40, name)), name


def test_candidates_are_a_global_stride(rng):
    t = rng.uniform(0, 1, 1003)
    src = ChunkedSeries(t, t)
    np.testing.assert_array_equal(candidate_times(src, cap=100, chunk=37), t[::11])
    np.testing.assert_array_equal(candidate_times(src, cap=5000), t)


def test_placement_errors():
    with pytest.raises(ValueError, match="one of"):
        place(ChunkedSeries(np.arange(5.0), np.zeros(5)), 3, "grid")
    with pytest.raises(ValueError, match="kernel"):
        place(ChunkedSeries(np.arange(5.0), np.zeros(5)), 3, "greedy")


@pytest.mark.parametrize("hyper", [False, True])
def test_optimising_inducing_times_raises_the_bound(hyper, rng):
    # source: Titsias 2009 sec. 3 (the bound is maximised over inducing inputs); the result
    # must beat its start and remain a lower bound on Exact's value
    from longwave import Model, Series
    from longwave.methods import VFE, Exact
    from longwave.methods.sparse_optimize import optimize_inducing

    t = _clustered_times(rng, 600)
    series = Series(t, np.sin(t / 2) + 0.1 * rng.standard_normal(t.size), err=0.1)
    model = Model(Matern32(amplitude=1.0, scale=2.0))
    result = optimize_inducing(model, series, VFE(inducing=15, placement="uniform"),
                               hyperparameters=hyper, max_iter=60)
    assert result.value > result.initial_value + 1.0
    assert result.method.inducing.size == 15 and np.all(np.diff(result.method.inducing) >= 0)
    again = result.method.evaluate(result.model, series).value
    assert again == pytest.approx(result.value, rel=1e-10)
    assert again <= Exact().evaluate(result.model, series).value
    if not hyper:
        assert result.model is model
