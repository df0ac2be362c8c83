"""Dense exact inference (``methods/exact.py``) against scikit-learn and scipy.

scikit-learn's GaussianProcessRegressor is the reference library: kernel
``ConstantKernel(c) * Matern(length_scale, nu)`` with ``c = amplitude^2``,
``alpha = err^2`` for the heteroscedastic errors, ``optimizer=None`` and
``normalize_y=False`` (so its prior mean is zero: it gets ``y - mean``).
Its ``log_marginal_likelihood(theta, eval_gradient=True)`` differentiates
with respect to ``log(c)``, ``log(length_scale)`` (and ``log(noise_level)``
of a WhiteKernel). Since ``c = amplitude^2``, ``d/dlog(amplitude) =
2 d/dlog(c)``; likewise ``d/dlog(excess_noise) = 2 d/dlog(noise_level)``.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import make_series
from scipy.stats import multivariate_normal

from longwave import Model, Param, Series
from longwave.kernels import Matern12, Matern32, Matern52
from longwave.methods import Exact

sk_kernels = pytest.importorskip("sklearn.gaussian_process.kernels")
from sklearn.gaussian_process import GaussianProcessRegressor  # noqa: E402

NU = {Matern12: 0.5, Matern32: 1.5, Matern52: 2.5}


def reference_kernel(kernel):
    """The scikit-learn kernel equal to a longwave Matérn kernel or sum of them."""
    parts = []
    for leaf in kernel.leaves():
        amplitude, scale = (p.value for p in leaf.params())
        parts.append(sk_kernels.ConstantKernel(amplitude**2)
                     * sk_kernels.Matern(length_scale=scale, nu=NU[type(leaf)]))
    out = parts[0]
    for part in parts[1:]:
        out = out + part
    return out


def reference_gradient_to_ours(grad, n_leaves, has_excess):
    """Map scikit-learn's theta gradient to longwave's kernel (+ excess) coordinates.

    scikit-learn orders each product's theta as (log c, log length_scale), sums
    concatenate, a WhiteKernel comes last.
    """
    out = []
    for i in range(n_leaves):
        d_log_c, d_log_scale = grad[2 * i], grad[2 * i + 1]
        out += [2 * d_log_c, d_log_scale]
    if has_excess:
        out.append(2 * grad[-1])
    return np.array(out)


CASES = {
    "matern12": lambda: Matern12(amplitude=1.3, scale=4.0),
    "matern32": lambda: Matern32(amplitude=0.7, scale=6.0),
    "matern52": lambda: Matern52(amplitude=2.0, scale=9.0),
    "matern32+matern12": lambda: Matern32(amplitude=1.0, scale=10.0)
    + Matern12(amplitude=0.4, scale=1.5),
}


@pytest.fixture(params=sorted(CASES))
def reference_case(request, rng):
    kernel = CASES[request.param]()
    series = make_series(rng, 160, amplitude=float(np.sqrt(kernel.variance())), step=1.0,
                         n_duplicates=4, n_gaps=2, gap=40.0)
    return kernel, series


@pytest.mark.parametrize("excess", [None, 0.2], ids=["errors-only", "excess-noise"])
def test_log_marginal_likelihood_and_gradient_equal_scikit_learn(reference_case, excess):
    # source: scikit-learn GaussianProcessRegressor.log_marginal_likelihood(eval_gradient=True)
    kernel, series = reference_case
    mean = 0.3
    model = Model(kernel, mean=mean, excess_noise=excess)
    sk_kernel = reference_kernel(kernel)
    if excess is not None:
        sk_kernel = sk_kernel + sk_kernels.WhiteKernel(noise_level=excess**2)
    gpr = GaussianProcessRegressor(sk_kernel, alpha=series.err**2, optimizer=None,
                                   normalize_y=False).fit(series.t[:, None], series.y - mean)
    value, grad = gpr.log_marginal_likelihood(gpr.kernel_.theta, eval_gradient=True)
    ev = Exact().evaluate(model, series, gradient=True)
    assert ev.value == pytest.approx(value, rel=1e-12)
    names = model.free_names
    expected = reference_gradient_to_ours(grad, len(kernel.leaves()), excess is not None)
    ours = np.delete(ev.grad, names.index("mean"))
    np.testing.assert_allclose(ours, expected, rtol=1e-9, atol=1e-9 * np.abs(expected).max())
    # d/dmean = sum(K^-1 (y - mean)) = sum of scikit-learn's alpha_ (R&W 2006, eq. 2.30
    # differentiated; alpha_ is its K^-1 y)
    assert ev.grad[names.index("mean")] == pytest.approx(gpr.alpha_.sum(), rel=1e-9)


@pytest.mark.parametrize("excess", [None, 0.2], ids=["errors-only", "excess-noise"])
def test_predictions_equal_scikit_learn(reference_case, excess, rng):
    # source: scikit-learn GaussianProcessRegressor.predict(return_std=True). With a
    # WhiteKernel its variance includes the white noise (kernel.diag adds it), so it is
    # compared with our prediction of a new observation with err = 0.
    kernel, series = reference_case
    mean = -0.4
    model = Model(kernel, mean=mean, excess_noise=excess)
    sk_kernel = reference_kernel(kernel)
    if excess is not None:
        sk_kernel = sk_kernel + sk_kernels.WhiteKernel(noise_level=excess**2)
    gpr = GaussianProcessRegressor(sk_kernel, alpha=series.err**2, optimizer=None,
                                   normalize_y=False).fit(series.t[:, None], series.y - mean)
    t = series.t
    tq = np.concatenate([t[:5], rng.uniform(t[0] - 20, t[-1] + 20, 50), [t[-1] + 1e4]])
    sk_mean, sk_std = gpr.predict(tq[:, None], return_std=True)
    pred = Exact().posterior(model, series).predict(tq, observed=excess is not None)
    np.testing.assert_allclose(pred.mean, sk_mean + mean, rtol=1e-9, atol=1e-10)
    np.testing.assert_allclose(pred.std, sk_std, rtol=1e-7, atol=1e-9)


def test_equals_scipy_multivariate_normal(rng):
    # source: scipy.stats.multivariate_normal.logpdf of y ~ N(mean, K + diag(noise))
    kernel = Matern32(amplitude=1.1, scale=2.0) * Matern12(amplitude=0.9, scale=8.0)
    t = np.sort(rng.uniform(0, 30, 40))
    err = rng.uniform(0.1, 0.3, 40)
    y = rng.standard_normal(40)
    model = Model(kernel, mean=0.25, excess_noise=0.05)
    cov = kernel(t) + np.diag(err**2 + 0.05**2)
    expected = multivariate_normal(mean=np.full(40, 0.25), cov=cov).logpdf(y)
    assert Exact().evaluate(model, Series(t, y, err)).value == pytest.approx(expected, rel=1e-12)


def test_posterior_at_the_data_equals_dense_formula(rng):
    # source: R&W 2006, eqs. 2.25-2.26 written out with numpy.linalg.solve
    kernel = Matern52(amplitude=1.0, scale=3.0)
    t = np.sort(rng.uniform(0, 20, 30))
    err = rng.uniform(0.1, 0.3, 30)
    y = rng.standard_normal(30)
    K = kernel(t)
    Ky = K + np.diag(err**2)
    mean = K @ np.linalg.solve(Ky, y)
    var = np.diag(K - K @ np.linalg.solve(Ky, K))
    pred = Exact().posterior(Model(kernel, mean=0.0), Series(t, y, err)).predict(t)
    np.testing.assert_allclose(pred.mean, mean, rtol=1e-10)
    np.testing.assert_allclose(pred.var, var, rtol=1e-9)


def test_jitter_adds_to_the_noise_variance(rng):
    # source: Exact docstring (jitter is a variance added to the diagonal)
    series = make_series(rng, 40)
    model = Model(Matern32(amplitude=1.0, scale=3.0))
    jittered = Exact(jitter=0.01).evaluate(model, series).value
    wider = Series(series.t, series.y, np.sqrt(series.err**2 + 0.01))
    assert jittered == pytest.approx(Exact().evaluate(model, wider).value, rel=1e-13)


def test_refuses_long_series_with_advice(monkeypatch):
    series = Series(np.arange(50.0), np.zeros(50), err=0.1)
    model = Model(Matern32(amplitude=1.0, scale=3.0))
    with pytest.raises(ValueError) as info:
        Exact(max_n=20).evaluate(model, series)
    for word in ["n=50", "limit of 20", "Kalman()", "max_n"]:
        assert word in str(info.value)
    monkeypatch.setenv("LONGWAVE_EXACT_MAX_N", "30")
    with pytest.raises(ValueError, match="limit of 30"):
        Exact().evaluate(model, series)
    monkeypatch.setenv("LONGWAVE_EXACT_MAX_N", "50")
    assert np.isfinite(Exact().evaluate(model, series).value)


@pytest.mark.parametrize("kwargs, words", [
    ({"max_n": 0}, ["max_n", "positive", "0"]),
    ({"jitter": -1e-9}, ["jitter", "non-negative"]),
])
def test_bad_options_raise(kwargs, words):
    with pytest.raises(ValueError) as info:
        Exact(**kwargs)
    for word in words:
        assert word in str(info.value)


def test_singular_covariance_raises_with_advice():
    # two copies of one time with negligible noise: K is [[1, 1], [1, 1]] to round-off
    model = Model(Matern32(amplitude=1.0, scale=1.0))
    series = Series([0.0, 0.0], [0.1, 0.2], err=1e-20)
    with pytest.raises(np.linalg.LinAlgError, match="not positive definite.*jitter"):
        Exact().evaluate(model, series)


def test_missing_noise_is_refused():
    with pytest.raises(ValueError, match="Exact: the series has no error bars"):
        Exact().evaluate(Model(Matern32(amplitude=1.0, scale=1.0)), Series([0.0, 1.0], [0, 1]))


def test_fixed_parameters_are_left_out_of_the_gradient(rng):
    series = make_series(rng, 30)
    free = Model(Matern32(amplitude=1.0, scale=3.0), mean=0.1, excess_noise=0.1)
    held = Model(Matern32(amplitude=Param(1.0, fixed=True), scale=3.0), mean=0.1,
                 excess_noise=Param(0.1, fixed=True))
    full = Exact().evaluate(free, series, gradient=True).grad
    part = Exact().evaluate(held, series, gradient=True).grad
    assert held.free_names == ["matern32.scale", "mean"]
    np.testing.assert_allclose(part, full[[1, 2]], rtol=1e-14)
