"""Predictions written into arrays the caller passes (``Posterior.predict(out=...)``).

Sources:
- Dense exact inference (Rasmussen & Williams 2006, eqs. 2.25-2.26, as
  computed by ``Exact``) is the reference for the values.
- The behaviour asked of ``out`` follows numpy's ``out=`` convention (common
  practice): the result is written into the given arrays, which are returned.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import hard_series

import longwave as lw
from longwave.kernels import Matern12, Matern32
from longwave.methods import FITC, VFE, Exact
from longwave.methods.kalman import KalmanPosterior


def _model():  # state dimension 3: the specialised loops and the split apply
    return lw.Model(Matern32(amplitude=0.8, scale=5.0) + Matern12(amplitude=0.3, scale=20.0),
                    mean=0.4, excess_noise=0.05)


POSTERIORS = {
    "exact": lambda m, s: lw.posterior(m, s, method=Exact()),
    "kalman-split": lambda m, s: KalmanPosterior(m, s, fast=True, split=True, block=64),
    "kalman-whole": lambda m, s: KalmanPosterior(m, s, fast=True, split=False, block=64),
    "kalman-stored": lambda m, s: KalmanPosterior(m, s, fast=True, lean=False, split=False),
    "kalman-general": lambda m, s: KalmanPosterior(m, s, fast=False, block=64),
    "vfe": lambda m, s: lw.posterior(m, s, method=VFE(inducing=40)),
    "fitc": lambda m, s: lw.posterior(m, s, method=FITC(inducing=40)),
}


def _queries(rng, series, ordered):
    t = series.t
    tq = np.concatenate([rng.uniform(t[0] - 40.0, t[-1] + 40.0, 700), t[::7]])
    return np.sort(tq) if ordered else tq


@pytest.mark.parametrize("ordered", [True, False], ids=["sorted", "unsorted"])
@pytest.mark.parametrize("observed", [False, True], ids=["latent", "observed"])
@pytest.mark.parametrize("name", sorted(POSTERIORS))
def test_out_receives_the_same_prediction(rng, name, observed, ordered):
    series = hard_series(rng, 900, scale=5.0, amplitude=1.0)
    model = _model()
    post = POSTERIORS[name](model, series)
    assert (getattr(post, "split_at", None) is not None) == (name == "kalman-split")
    tq = _queries(rng, series, ordered)
    err = rng.uniform(0.01, 0.2, tq.size) if observed else None
    ref = post.predict(tq, observed=observed, err=err)
    # Filled with garbage first: a path that read its outputs before writing them would show.
    mean, var = np.full(tq.size, np.nan), np.full(tq.size, -1e300)
    # A new posterior: its first prediction runs the backward pass (Kalman's checkpoints)
    post = POSTERIORS[name](model, series)
    got = post.predict(tq, observed=observed, err=err, out=(mean, var))
    assert got.mean is mean and got.var is var
    np.testing.assert_array_equal(mean, ref.mean)
    np.testing.assert_array_equal(var, ref.var)
    if name.startswith("kalman"):  # and the values are right, against dense algebra
        dense = lw.posterior(model, series, method=Exact()).predict(tq, observed=observed, err=err)
        np.testing.assert_allclose(mean, dense.mean, rtol=1e-8, atol=1e-8)
        np.testing.assert_allclose(var, dense.var, rtol=1e-8, atol=1e-10)


def test_reused_out_holds_only_the_latest_prediction(rng):
    series = hard_series(rng, 1200, scale=5.0, amplitude=1.0)
    post = KalmanPosterior(_model(), series, fast=True, split=True, block=64)
    buffers = np.empty((2, 500))
    for k in range(3):  # slices of one buffer, as predict_to_hdf5 uses them
        tq = np.sort(rng.uniform(series.t[0], series.t[-1], 500 - 100 * k))
        mean, var = buffers[0, :tq.size], buffers[1, :tq.size]
        post.predict(tq, out=(mean, var))
        ref = post.predict(tq)
        np.testing.assert_array_equal(mean, ref.mean)
        np.testing.assert_array_equal(var, ref.var)


@pytest.fixture
def small_posterior(rng):
    series = hard_series(rng, 200, scale=5.0, amplitude=1.0)
    return lw.posterior(_model(), series)


def test_bad_out_is_refused_with_what_is_wrong(small_posterior):
    post = small_posterior
    tq = np.linspace(0.0, 50.0, 10)
    good = np.empty(10)
    cases = [
        (good, "tuple \\(mean, var\\) of two arrays, got ndarray"),
        ((good,), "tuple \\(mean, var\\) of two arrays"),
        ((good, [0.0] * 10), "var must be a numpy array, got list"),
        ((np.empty(9), good), "mean must be float64 of shape \\(10,\\) like t, got float64 "
                              "of shape \\(9,\\)"),
        ((good, np.empty(10, dtype=np.float32)), "var must be float64 .* got float32"),
        ((np.empty(20)[::2], good), "mean must be C-contiguous and writeable"),
        ((good, good), "mean and var overlap"),
        ((good, tq), "var overlaps t"),
    ]
    frozen = np.empty(10)
    frozen.flags.writeable = False
    cases.append(((frozen, good), "mean must be C-contiguous and writeable"))
    for out, message in cases:
        with pytest.raises(ValueError, match=message):
            post.predict(tq, out=out)


def test_bad_out_leaves_the_arrays_untouched(small_posterior):
    mean, var = np.full(10, 7.0), np.full(10, 7.0)
    with pytest.raises(ValueError, match="overlaps t"):
        small_posterior.predict(mean, out=(mean, var))  # t is the mean array itself
    np.testing.assert_array_equal(var, 7.0)


def test_bad_err_leaves_the_arrays_untouched(small_posterior):
    tq = np.linspace(0.0, 50.0, 10)
    mean, var = np.full(10, 7.0), np.full(10, 7.0)
    with pytest.raises(ValueError, match="err must be a number or an array of shape \\(10,\\)"):
        small_posterior.predict(tq, observed=True, err=np.ones(9), out=(mean, var))
    np.testing.assert_array_equal(mean, 7.0)
    np.testing.assert_array_equal(var, 7.0)


def test_err_that_is_an_output_array_is_read_before_it_is_overwritten(small_posterior):
    # the noise added is that of the errors given, not of the latent variance
    tq = np.linspace(0.0, 50.0, 10)
    err = np.full(10, 0.3)
    ref = small_posterior.predict(tq, observed=True, err=err.copy())
    mean, var = np.empty(10), err
    got = small_posterior.predict(tq, observed=True, err=err, out=(mean, var))
    np.testing.assert_array_equal(got.var, ref.var)


@pytest.mark.parametrize("side", ["left", "right"])
def test_split_posterior_with_every_query_on_one_side(rng, side):
    # Exact (dense) is the reference; one half's slices of the outputs are empty
    series = hard_series(rng, 900, scale=5.0, amplitude=1.0)
    model = _model()
    post = KalmanPosterior(model, series, fast=True, split=True, block=64)
    assert post.split_at is not None
    t_join = series.t[post.split_at]
    if side == "left":
        lo, hi = series.t[0] - 30.0, t_join
    else:
        lo, hi = t_join + 1e-9, series.t[-1] + 30.0
    tq = np.linspace(lo, hi, 300)
    mean, var = np.full(300, np.nan), np.full(300, np.nan)
    post.predict(tq, out=(mean, var))
    ref = lw.posterior(model, series, method=Exact()).predict(tq)
    np.testing.assert_allclose(mean, ref.mean, rtol=1e-8, atol=1e-8)
    np.testing.assert_allclose(var, ref.var, rtol=1e-8, atol=1e-10)


def test_observed_without_err_adds_only_the_excess_noise(small_posterior):
    # common practice: a new observation's variance is the latent variance plus its noise
    tq = np.linspace(0.0, 50.0, 10)
    latent = small_posterior.predict(tq)
    excess = small_posterior.model.excess_variance
    assert excess > 0.0
    mean, var = np.empty(10), np.empty(10)
    for out in (None, (mean, var)):
        got = small_posterior.predict(tq, observed=True, out=out)
        np.testing.assert_allclose(got.var, latent.var + excess, rtol=1e-14)
        np.testing.assert_array_equal(got.mean, latent.mean)
