"""Prior draws and simulated series (``simulate.py``).

Statistical checks, each with a fixed seed (so deterministic) and a stated
tolerance:

* Whitening: if ``f ~ N(0, K)`` then ``L^-1 f`` (``K = L L^T``) is iid
  N(0, 1) (common practice). Checked with scipy.stats.kstest (p > 1e-3) and
  with the sample mean and variance within 4 standard errors (1/sqrt(n),
  sqrt(2/n)).
* Sample covariance over N independent draws: entry (i, j) has standard
  deviation sqrt((K_ii K_jj + K_ij^2) / N) (Wishart second moments;
  Anderson 2003, "An Introduction to Multivariate Statistical Analysis",
  sec. 7.2, from memory); each entry must lie within 4 of them.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import NoStateSpace, kernel_scale
from scipy.linalg import cholesky, solve_triangular
from scipy.stats import kstest

from longwave import Model
from longwave.kernels import Matern32
from longwave.simulate import sample_prior, simulate_series


def whitened(kernel, t, f):
    L = cholesky(kernel(t), lower=True)
    return solve_triangular(L, f, lower=True)


def assert_standard_normal(w):
    n = w.size
    assert abs(w.mean()) < 4 / np.sqrt(n)
    assert abs(w.var() - 1) < 4 * np.sqrt(2 / n)
    assert kstest(w, "norm").pvalue > 1e-3


@pytest.fixture
def cadence(kernel, rng):
    # steps of 0.3-2 length scales keep K well conditioned for the whitening
    return np.cumsum(rng.uniform(0.3, 2.0, 1500) * kernel_scale(kernel))


def test_state_space_draw_whitens_to_standard_normal(kernel, cadence, rng):
    # source: f ~ N(0, K) iff L^-1 f ~ N(0, I) (common practice); scipy.stats.kstest
    f = sample_prior(kernel, cadence, rng=rng)
    assert_standard_normal(whitened(kernel, cadence, f))


def test_dense_draw_whitens_to_standard_normal(rng):
    kernel = NoStateSpace(amplitude=1.5, scale=4.0)
    t = np.cumsum(rng.uniform(1.0, 6.0, 800))
    f = sample_prior(kernel, t, rng=rng)
    assert_standard_normal(whitened(kernel, t, f))


@pytest.mark.parametrize("dense", [False, True], ids=["state-space", "dense"])
def test_sample_covariance_matches_kernel(dense):
    # source: Wishart second moments of the sample covariance (see module docstring)
    kernel = NoStateSpace(amplitude=1.2, scale=2.0) if dense else Matern32(amplitude=1.2,
                                                                             scale=2.0)
    t = np.array([0.0, 0.5, 1.7, 4.0, 4.0])  # includes a repeated time
    rng = np.random.default_rng(2024)
    draws = np.array([sample_prior(kernel, t, rng=rng) for _ in range(3000)])
    K = kernel(t)
    sd = np.sqrt((np.outer(np.diag(K), np.diag(K)) + K**2) / draws.shape[0])
    sample = draws.T @ draws / draws.shape[0]  # known zero mean
    assert np.all(np.abs(sample - K) < 4 * sd)


def test_repeated_times_get_the_same_value(kernel, rng):
    t = np.array([0.0, 1.0, 1.0, 1.0, 2.5, 2.5])
    f = sample_prior(kernel, t, rng=rng)
    assert f[1] == f[2] == f[3] and f[4] == f[5]


@pytest.mark.parametrize("kernel_case", ["matern32"])
def test_seeds_make_draws_reproducible(kernel):
    t = np.linspace(0, 10, 50)
    assert np.array_equal(sample_prior(kernel, t), sample_prior(kernel, t))  # default seed 0
    assert np.array_equal(sample_prior(kernel, t, rng=5), sample_prior(kernel, t, rng=5))
    assert not np.array_equal(sample_prior(kernel, t, rng=5), sample_prior(kernel, t, rng=6))
    g1, g2 = np.random.default_rng(9), np.random.default_rng(9)
    assert np.array_equal(sample_prior(kernel, t, rng=g1), sample_prior(kernel, t, rng=g2))


@pytest.mark.parametrize("t, words", [
    ([0.0, 2.0, 1.0], ["sorted ascending", "t[2] = 1.0 < t[1] = 2.0"]),
    (np.zeros((2, 2)), ["non-empty 1-D", "(2, 2)"]),
    ([], ["non-empty 1-D", "(0,)"]),
])
def test_sample_prior_rejects_bad_times(t, words):
    with pytest.raises(ValueError) as info:
        sample_prior(Matern32(amplitude=1.0, scale=1.0), t)
    for word in words:
        assert word in str(info.value)


def test_dense_limit_is_enforced():
    with pytest.raises(ValueError) as info:
        sample_prior(NoStateSpace(amplitude=1.0, scale=1.0), np.arange(20.0), dense_max_n=10)
    for word in ["no state-space form", "n=20", "dense_max_n=10"]:
        assert word in str(info.value)


@pytest.mark.parametrize("err, excess", [(0.2, None), (None, 0.3), ("varying", 0.1)])
def test_simulate_series_noise_has_the_model_variance(err, excess, rng):
    # source: y = mean + f + e, e ~ N(0, err^2 + excess^2) (model.py docstring); the
    # standardised residuals must be standard normal (checks as above)
    n = 4000
    t = np.sort(rng.uniform(0, 4000, n))
    if err == "varying":
        err = rng.uniform(0.05, 0.5, n)
    model = Model(Matern32(amplitude=1.0, scale=5.0), mean=2.5, excess_noise=excess)
    series, latent = simulate_series(model, t, err, rng=rng)
    np.testing.assert_array_equal(series.t, t)
    assert series.has_err is (err is not None)
    noise_sd = np.sqrt(model.noise_variance(series.err))
    assert_standard_normal((series.y - latent) / noise_sd)
    # the latent values are mean + a prior draw: their mean is near 2.5
    # (standard error of a mean over a span of 800 scales: ~ sqrt(2 * 5 / 4000))
    assert abs(latent.mean() - 2.5) < 4 * np.sqrt(2 * 5.0 / 4000)
    if err is not None:
        np.testing.assert_allclose(series.err, np.broadcast_to(err, (n,)))


def test_simulate_series_is_reproducible():
    model = Model(Matern32(amplitude=1.0, scale=5.0), excess_noise=0.1)
    t = np.arange(100.0)
    a, la = simulate_series(model, t, 0.1, rng=3)
    b, lb = simulate_series(model, t, 0.1, rng=3)
    np.testing.assert_array_equal(a.y, b.y)
    np.testing.assert_array_equal(la, lb)
