"""The Kalman posterior built in two halves (``methods/kalman_split.py``).

Sources:
- Dense exact inference (Rasmussen & Williams 2006, eqs. 2.22-2.24, as
  computed by ``Exact``) and the one-pass RTS smoother (Rauch, Tung &
  Striebel 1965) are the references for the posterior.
- The backward transition of a stationary Gauss-Markov process is
  ``Pinf A(dt)^T Pinf^-1`` (Bayes' rule on the joint Gaussian of two states;
  common practice), here from ``scipy.linalg.expm`` of the feedback matrix.
- The two-filter combination ``(A^-1 + B^-1 - Pinf^-1)^-1`` (Fraser & Potter
  1969), evaluated directly with matrix inverses on well-conditioned cases.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg
from conftest import hard_series, make_kernel
from hypothesis import given
from test_properties import SETTINGS, condition, problems

import longwave as lw
from longwave._config import limit_threads
from longwave.kernels import Matern12, Matern32, Matern52, Oscillator
from longwave.methods import Exact
from longwave.methods import kalman_split as split
from longwave.methods.kalman import KalmanPosterior, fast_form

CASES = ["matern12", "matern32", "matern52", "matern32+matern12", "oscillator"]


def _kernel(case):
    if case == "oscillator":  # rotating transition: the general ("multi") loops, S not diagonal
        return Oscillator(amplitude=0.9, frequency=0.8, quality=3.0)
    return make_kernel(case)


def _queries(rng, series, j):
    t = series.t
    return np.concatenate([
        rng.uniform(t[0] - 30.0, t[-1] + 30.0, 400),  # unsorted, beyond both ends
        t[j - 2:j + 3],  # at and around the join
        [t[j] + 0.5 * (t[j + 1] - t[j])],  # inside the join's gap
        t[::5],
    ])


@pytest.mark.parametrize("case", CASES)
def test_split_posterior_equals_one_pass_and_exact(rng, case):
    kernel = _kernel(case)
    model = lw.Model(kernel, mean=0.2, excess_noise=0.03)
    series = hard_series(rng, 1500, scale=5.0, amplitude=1.0)
    post = KalmanPosterior(model, series, fast=True, split=True, block=100)
    j = post.split_at
    assert j is not None and 0.4 * series.n <= j <= 0.6 * series.n
    assert series.t[j + 1] > series.t[j]
    tq = _queries(rng, series, j)
    got = post.predict(tq)
    one = KalmanPosterior(model, series, fast=True, split=False).predict(tq)
    np.testing.assert_allclose(got.mean, one.mean, rtol=1e-10, atol=1e-11)
    np.testing.assert_allclose(got.var, one.var, rtol=1e-9, atol=1e-12)
    ref = Exact().posterior(model, series).predict(tq)
    np.testing.assert_allclose(got.mean, ref.mean, rtol=1e-8, atol=1e-9)
    np.testing.assert_allclose(got.var, ref.var, rtol=1e-8, atol=1e-10)
    # Later predictions (kept smoothed states), sorted and reversed, agree with the first.
    again = post.predict(np.sort(tq))
    order = np.argsort(tq, kind="stable")
    np.testing.assert_allclose(again.mean, got.mean[order], rtol=1e-13, atol=1e-13)
    back = post.predict(tq[::-1])
    np.testing.assert_allclose(back.var, got.var[::-1], rtol=1e-13, atol=1e-15)


@pytest.mark.parametrize("cls", [Matern12, Matern32, Matern52])
def test_matern_reversal_flips_odd_derivatives(cls):
    ss = cls(amplitude=1.7, scale=3.0).state_space()
    form = fast_form(ss)
    s_map = split.reversal(form.pinf, form.trans)
    d = ss.dim
    np.testing.assert_array_equal(s_map, np.diag((-1.0) ** np.arange(d)))
    for dt in (0.1, 1.0, 7.0):
        a = scipy.linalg.expm(ss.F * dt)
        backward = ss.Pinf @ a.T @ np.linalg.inv(ss.Pinf)
        np.testing.assert_allclose(s_map @ a @ s_map, backward, rtol=1e-10, atol=1e-12)


def test_reversal_of_a_rotating_sum_is_checked_against_expm():
    kernel = Oscillator(amplitude=0.9, frequency=0.8, quality=3.0) + Matern12(amplitude=0.3,
                                                                               scale=2.0)
    ss = kernel.state_space()
    form = fast_form(ss)  # d = 3, observation not e_0: a changed basis
    s_map = split.reversal(form.pinf, form.trans)
    assert s_map is not None
    np.testing.assert_allclose(s_map[0], np.eye(3)[0], atol=1e-12)
    np.testing.assert_allclose(s_map @ form.pinf @ s_map.T, form.pinf, rtol=1e-10, atol=1e-12)
    # The fast basis is x' = T x with T's first row H (see fast_form); there
    # the transition is T expm(F dt) T^-1 and the backward one follows from it.
    j0 = int(np.argmax(np.abs(ss.H)))
    T = np.eye(3)[[j0] + [j for j in range(3) if j != j0]]
    T[0] = ss.H
    for dt in (0.3, 2.0, 9.0):
        a = T @ scipy.linalg.expm(ss.F * dt) @ np.linalg.inv(T)
        backward = form.pinf @ a.T @ np.linalg.inv(form.pinf)
        assert not np.allclose(a, backward)  # reversal is not the identity here
        np.testing.assert_allclose(s_map @ a @ np.linalg.inv(s_map), backward,
                                   rtol=1e-9, atol=1e-11)


def test_a_model_that_is_not_minimal_is_not_split(rng):
    # Two identical Matérn-1/2 terms: a 2-state model of a 1-state process.
    model = lw.Model(Matern12(amplitude=1.0, scale=3.0) + Matern12(amplitude=1.0, scale=3.0))
    form = fast_form(model.kernel.state_space())
    assert split.reversal(form.pinf, form.trans) is None
    series = hard_series(rng, 200, scale=3.0, amplitude=1.4)
    post = KalmanPosterior(model, series, fast=True, split=True)
    assert post.split_at is None
    tq = rng.uniform(series.t[0], series.t[-1], 50)
    ref = Exact().posterior(model, series).predict(tq)
    np.testing.assert_allclose(post.predict(tq).mean, ref.mean, rtol=1e-8, atol=1e-9)


def _informed(rng, pinf):
    """A mean and a covariance below ``pinf``: the prior updated with two noisy projections."""
    d = pinf.shape[0]
    h = rng.standard_normal((2, d))
    noise = np.diag(rng.uniform(0.1, 2.0, 2))
    gain = pinf @ h.T @ np.linalg.inv(h @ pinf @ h.T + noise)
    return rng.standard_normal(d), pinf - gain @ h @ pinf


def test_join_equals_the_inverse_form(rng):
    d = 3
    inv = np.linalg.inv
    for _ in range(20):
        root = rng.standard_normal((d, d))
        pinf = root @ root.T + d * np.eye(d)
        (a, A), (b, B) = _informed(rng, pinf), _informed(rng, pinf)
        mean, cov = split.join((a, A), (b, B), pinf)
        want_cov = inv(inv(A) + inv(B) - inv(pinf))
        want_mean = want_cov @ (inv(A) @ a + inv(B) @ b)
        np.testing.assert_allclose(cov, want_cov, rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(mean, want_mean, rtol=1e-9, atol=1e-12)


def test_a_refused_join_builds_in_one_pass(rng, monkeypatch):
    model = lw.Model(Matern32(amplitude=1.0, scale=5.0), mean=0.1)
    series = hard_series(rng, 600, scale=5.0, amplitude=1.0)
    monkeypatch.setattr(split, "join", lambda *args: None)
    post = KalmanPosterior(model, series, fast=True, split=True)
    assert post.split_at is None and len(post._sweeps) == 1
    tq = rng.uniform(series.t[0], series.t[-1], 100)
    ref = Exact().posterior(model, series).predict(tq)
    np.testing.assert_allclose(post.predict(tq).var, ref.var, rtol=1e-8, atol=1e-10)


def test_default_splits_long_series_only_when_two_threads_are_allowed(rng, monkeypatch):
    model = lw.Model(Matern52(amplitude=1.0, scale=5.0))
    series = hard_series(rng, 400, scale=5.0, amplitude=1.0)
    assert lw.posterior(model, series).split_at is None  # below the default 100000
    monkeypatch.setenv("LONGWAVE_SPLIT_MIN_N", "300")
    import numba

    post = lw.posterior(model, series)
    assert (post.split_at is not None) == (numba.get_num_threads() >= 2)
    with limit_threads(1):  # as in a survey worker
        assert lw.posterior(model, series).split_at is None
    assert KalmanPosterior(model, series, fast=False).split_at is None  # general loops
    with pytest.raises(ValueError, match="split=True needs fast=True"):
        KalmanPosterior(model, series, fast=False, split=True)


def test_split_index_prefers_a_wide_gap_near_the_middle():
    t = np.arange(1000.0)
    t[430:] += 5.0  # a gap of 6 after index 429
    t[520:] += 4.0  # a gap of 5 after index 519: wide enough, nearer the middle
    assert split.split_index(t) == 519
    assert split.split_index(np.zeros(50)) is None  # all times equal: no gap


def test_an_error_in_either_thread_is_raised():
    def fail():
        raise RuntimeError("right half failed")

    with pytest.raises(RuntimeError, match="right half failed"):
        split.in_two_threads(lambda: 1, fail)
    assert split.in_two_threads(lambda: 1, lambda: 2) == (1, 2)


def test_a_failing_first_half_waits_for_the_second_and_names_both():
    import time

    finished = []

    def slow():
        time.sleep(0.05)
        finished.append(True)
        raise RuntimeError("right half failed")

    def fail():
        raise ValueError("left half failed")

    with pytest.raises(ValueError, match="left half failed") as info:
        split.in_two_threads(fail, slow)
    assert finished == [True]  # not returned while the thread could still write
    assert isinstance(info.value.__cause__, RuntimeError)


@SETTINGS
@given(problems())
def test_split_equals_exact_within_conditioning(problem):
    """Random kernels and data of ``test_properties``: the split posterior, where
    it is accepted, meets the same conditioning-scaled tolerances against Exact."""
    model, series, queries = problem
    if series.n < 4 or fast_form(model.kernel.state_space()) is None:
        return  # too short to split, or d > 3 (no specialised loops)
    kappa = condition(model, series)
    post = KalmanPosterior(model, series, fast=True, split=True, block=7)
    got = post.predict(queries)
    assert np.all(np.isfinite(got.mean)) and np.all(got.var >= 0)
    if kappa > 1e10:
        return
    ref = Exact().posterior(model, series).predict(queries)
    prior = model.kernel.variance()
    assert np.abs(got.mean - ref.mean).max() <= (1e-12 + 1e-12 * kappa) * np.sqrt(prior)
    assert np.abs(got.var - ref.var).max() <= (1e-12 + 1e-13 * kappa) * prior
