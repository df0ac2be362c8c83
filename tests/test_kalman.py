"""Kalman filter and RTS smoother (``methods/kalman.py``) against dense Exact inference.

Source of truth: dense Gaussian algebra, ``methods.Exact`` (Rasmussen &
Williams 2006, Algorithm 2.1 and eqs. 2.25-2.26, 2.30), which is itself
checked against scikit-learn in ``test_exact.py``. The Kalman route is exact
for kernels with a state-space form (Hartikainen & Särkkä 2010), so the two
agree to round-off; the issue asks for 1e-8 relative.

Data: n = 1500 irregular times with heteroscedastic errors, repeated times,
three gaps of 1000 length scales, all offset by 2.46e6.

Tolerances: values and gradients to 1e-8 relative. Posterior means to 1e-8
relative with an absolute floor of 1e-8 times the prior standard deviation,
variances to 1e-8 relative with a floor of 1e-8 times the prior variance (the
dense variance ``k(0) - v^T v`` is a difference, so near the data it carries
round-off of order eps * k(0) * cond(K) ~ 1e-16 * 1e6 of the prior variance).
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import hard_series, kernel_amplitude, kernel_scale, make_kernel, seed_for

from longwave import Model, Param, Series, log_marginal_likelihood, posterior
from longwave.kernels import Matern32
from longwave.methods import Exact, Kalman

N = 1500
RTOL = 1e-8


@pytest.fixture(scope="module", params=["matern12", "matern32", "matern52", "matern32+matern12"])
def setup(request):
    """Model, data, query times and the dense reference, computed once per kernel."""
    kernel = make_kernel(request.param)
    rng = np.random.default_rng(seed_for("test_kalman" + request.param))
    scale = kernel_scale(kernel)
    series = hard_series(rng, N, scale, kernel_amplitude(kernel))
    model = Model(kernel, mean=0.2, excess_noise=0.05 * kernel_amplitude(kernel))
    t = series.t
    steps = np.diff(t)
    gaps = np.flatnonzero(steps > 100 * scale)
    repeated = np.flatnonzero(steps == 0)
    assert gaps.size == 3 and repeated.size > 0 and t[0] > 2e6
    queries = {
        "data times": t[::7],
        "repeated times": t[repeated],
        "gap middles": t[gaps] + 0.5 * steps[gaps],
        "gap edges": np.concatenate([t[gaps] + 0.3 * scale, t[gaps + 1] - 0.3 * scale]),
        "before first": t[0] - scale * np.array([0.01, 0.5, 3.0]),
        "after last": t[-1] + scale * np.array([0.01, 0.5, 3.0]),
        "between points": np.sort(rng.uniform(t[0], t[-1], 300)),
        "shuffled with repeats": rng.permutation(np.repeat(t[100:110], 2)),
    }
    ex_eval = Exact().evaluate(model, series, gradient=True)
    ex_post = Exact().posterior(model, series)
    expected = {name: ex_post.predict(tq) for name, tq in queries.items()}
    return model, series, queries, ex_eval, expected


def test_log_marginal_likelihood_equals_exact(setup):
    # source: R&W 2006, eq. 2.30 / Algorithm 2.1 (methods.Exact); Hartikainen & Särkkä 2010
    model, series, _, ex_eval, _ = setup
    value = Kalman().evaluate(model, series).value
    assert value == pytest.approx(ex_eval.value, rel=RTOL)


def test_gradient_equals_exact(setup):
    # source: R&W 2006, eq. 5.9 (methods.Exact) against Kalman forward sensitivities
    model, series, _, ex_eval, _ = setup
    ev = Kalman().evaluate(model, series, gradient=True)
    assert ev.value == pytest.approx(ex_eval.value, rel=RTOL)
    assert ev.grad.shape == (len(model.free_names),)
    np.testing.assert_allclose(ev.grad, ex_eval.grad, rtol=RTOL,
                               atol=RTOL * np.abs(ex_eval.grad).max())


@pytest.mark.parametrize("where", [
    "data times", "repeated times", "gap middles", "gap edges", "before first",
    "after last", "between points", "shuffled with repeats",
])
def test_posterior_equals_exact(setup, where):
    # source: R&W 2006, eqs. 2.25-2.26 (methods.Exact); RTS smoother (Särkkä 2013, Thm 8.2)
    model, series, queries, _, expected = setup
    pred = Kalman().posterior(model, series).predict(queries[where])
    ref = expected[where]
    np.testing.assert_array_equal(pred.t, queries[where])
    np.testing.assert_allclose(pred.mean, ref.mean, rtol=RTOL,
                               atol=RTOL * kernel_amplitude(model.kernel))
    np.testing.assert_allclose(pred.var, ref.var, rtol=RTOL,
                               atol=RTOL * model.kernel.variance())


def test_far_from_data_the_posterior_is_the_prior(setup):
    # source: k(tau) -> 0 for tau >> scale, so mean -> model mean and var -> k(0)
    # (R&W 2006, eqs. 2.25-2.26 with k_* = 0)
    model, series, _, _, _ = setup
    far = np.array([series.t[0] - 1e6, series.t[-1] + 1e6, series.t[-1] + 1e9])
    for method in (Kalman(), Exact()):
        pred = method.posterior(model, series).predict(far)
        np.testing.assert_allclose(pred.mean, model.mean_value, rtol=1e-12)
        np.testing.assert_allclose(pred.var, model.kernel.variance(), rtol=1e-12)


def test_observed_prediction_adds_noise(setup):
    # source: predictive variance of a new observation = latent variance + noise
    # (R&W 2006, eq. 2.24 and the text after it)
    model, series, queries, _, _ = setup
    post = Kalman().posterior(model, series)
    tq = queries["between points"][:20]
    latent = post.predict(tq)
    observed = post.predict(tq, observed=True, err=0.3)
    np.testing.assert_allclose(observed.mean, latent.mean, rtol=0, atol=0)
    np.testing.assert_allclose(observed.var, latent.var + 0.09 + model.excess_variance,
                               rtol=1e-14)


# --- small cases, one kernel ------------------------------------------------------
def small_model(**kwargs):
    return Model(Matern32(amplitude=1.0, scale=2.0), **kwargs)


def test_single_point_matches_closed_form():
    # source: one Gaussian observation, y ~ N(mean, k(0) + err^2) (common practice)
    model = small_model(mean=0.5)
    series = Series([3.0], [1.7], err=0.4)
    var = 1.0 + 0.16
    expected = -0.5 * (np.log(2 * np.pi * var) + (1.7 - 0.5) ** 2 / var)
    assert Kalman().evaluate(model, series).value == pytest.approx(expected, rel=1e-14)
    pred = Kalman().posterior(model, series).predict([3.0])
    # posterior of f at the point: gain k(0) / var (R&W 2006, eqs. 2.25-2.26)
    assert pred.mean[0] == pytest.approx(0.5 + 1.2 / var, rel=1e-14)
    assert pred.var[0] == pytest.approx(1.0 - 1.0 / var, rel=1e-13)


@pytest.mark.parametrize("method", [Kalman(), Exact()], ids=["kalman", "exact"])
def test_repeated_time_equals_weighted_average(method):
    # source: two observations of the same f(t) with errors e1, e2 carry the same
    # information about f as one at the inverse-variance weighted mean with error
    # (1/e1^2 + 1/e2^2)^(-1/2) (Gaussian product rule, common practice): the
    # posteriors agree exactly
    model = small_model(mean=0.1)
    y1, y2, e1, e2 = 0.3, 0.5, 0.2, 0.4
    w1, w2 = 1 / e1**2, 1 / e2**2
    merged = Series([0.0, 1.5], [(w1 * y1 + w2 * y2) / (w1 + w2), -0.2],
                    [1 / np.sqrt(w1 + w2), 0.1])
    repeated = Series([0.0, 0.0, 1.5], [y1, y2, -0.2], [e1, e2, 0.1])
    tq = [-1.0, 0.0, 0.7, 1.5, 3.0]
    a = method.posterior(model, repeated).predict(tq)
    b = method.posterior(model, merged).predict(tq)
    np.testing.assert_allclose(a.mean, b.mean, rtol=1e-12)
    np.testing.assert_allclose(a.var, b.var, rtol=1e-12)


def test_no_error_bars_with_excess_noise():
    # source: methods.Exact on the same model (R&W 2006, Algorithm 2.1)
    model = small_model(excess_noise=0.2)
    series = Series([0.0, 1.0, 1.3, 4.0], [0.1, 0.4, 0.2, -0.5])
    assert not series.has_err
    assert Kalman().evaluate(model, series).value == pytest.approx(
        Exact().evaluate(model, series).value, rel=1e-13)


def test_missing_noise_is_refused():
    with pytest.raises(ValueError, match="no error bars.*excess_noise"):
        Kalman().evaluate(small_model(), Series([0.0, 1.0], [0.0, 1.0]))


def test_fixed_parameters_are_left_out_of_the_gradient():
    # source: model.free_names order (DEVELOPERS.md), compared with methods.Exact
    model = Model(Matern32(amplitude=Param(1.0, fixed=True), scale=2.0),
                  mean=Param(0.1, fixed=True), excess_noise=0.1)
    assert model.free_names == ["matern32.scale", "excess_noise"]
    series = Series(np.arange(30.0) * 0.7, np.sin(np.arange(30.0)), err=0.2)
    grad_k = Kalman().evaluate(model, series, gradient=True).grad
    grad_e = Exact().evaluate(model, series, gradient=True).grad
    assert grad_k.shape == (2,)
    np.testing.assert_allclose(grad_k, grad_e, rtol=1e-10)


def test_default_method_is_kalman_and_agrees():
    # source: inference.default_method picks Kalman for state-space kernels
    model = small_model(excess_noise=0.1)
    series = Series([0.0, 1.0, 2.0, 3.5], [0.0, 0.5, 0.2, 0.1], err=0.1)
    assert log_marginal_likelihood(model, series) == Kalman().evaluate(model, series).value
    pred = posterior(model, series).predict([1.5])
    assert pred.mean == pytest.approx(Kalman().posterior(model, series).predict([1.5]).mean)


@pytest.mark.parametrize("bad, words", [
    (np.zeros((2, 2)), ["one-dimensional", "(2, 2)"]),
    ([0.0, np.nan], ["finite", "nan", "index 1"]),
    ([np.inf], ["finite", "inf", "index 0"]),
])
def test_predict_rejects_bad_times(bad, words):
    post = Kalman().posterior(small_model(), Series([0.0, 1.0], [0.0, 1.0], err=0.1))
    with pytest.raises(ValueError) as info:
        post.predict(bad)
    for word in words:
        assert word in str(info.value)


def test_predict_accepts_empty_and_lists():
    post = Kalman().posterior(small_model(), Series([0.0, 1.0], [0.0, 1.0], err=0.1))
    assert post.predict([]).mean.shape == (0,)
    assert post.predict([0.5, 0.5]).var.shape == (2,)


def test_observed_prediction_rejects_error_bars_of_the_wrong_shape():
    # Common practice: an input error names the expected shape and the one received.
    import longwave as lw
    from longwave.kernels import Matern32

    series = lw.Series([0.0, 1.0, 2.0], [0.1, 0.2, 0.0], err=0.1)
    post = lw.posterior(lw.Model(Matern32(amplitude=1.0, scale=1.0)), series)
    with pytest.raises(ValueError, match=r"shape \(4,\) matching t, got shape \(3,\)"):
        post.predict([0.5, 1.5, 2.5, 3.5], observed=True, err=[0.1, 0.1, 0.1])
    pred = post.predict([0.5, 1.5], observed=True, err=[0.1, 0.2])
    latent = post.predict([0.5, 1.5])
    np.testing.assert_allclose(pred.var - latent.var, [0.01, 0.04])


@pytest.mark.parametrize("method", [Exact(), Kalman()])
@pytest.mark.parametrize("value", [np.nan, np.inf, -np.inf])
def test_prediction_times_must_be_finite_and_the_first_bad_one_is_named(method, value):
    s = Series([0.0, 1.0, 2.5], [0.1, 0.3, -0.2], err=0.1)
    post = posterior(Model(Matern32(amplitude=1.0, scale=1.0)), s, method=method)
    t = np.linspace(-1.0, 4.0, 70_000)  # more than one chunk of the parallel scan
    t[66_000], t[69_999] = value, np.nan
    with pytest.raises(ValueError, match=f"t must be finite, found {value} at index 66000"):
        post.predict(t)
    shuffled = np.random.default_rng(7).permutation(np.linspace(-1.0, 4.0, 50))
    # unsorted queries are accepted and mapped back (the order check does not refuse them)
    np.testing.assert_allclose(post.predict(shuffled).mean,
                               post.predict(np.sort(shuffled)).mean[np.argsort(np.argsort(shuffled))],
                               rtol=1e-12, atol=1e-14)
