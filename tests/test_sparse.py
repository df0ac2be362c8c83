"""VFE and FITC (``methods/sparse*.py``) against Exact and a direct dense computation.

Sources:
* inducing times = data times makes ``Q = Kff`` (up to the jitter), so both
  approximations equal the exact GP (Titsias 2009, sec. 3; Snelson &
  Ghahramani 2006, sec. 2): compared with ``longwave.methods.Exact``;
* the dense forms ``Q = Kfu Kuu^-1 Kuf`` of both objectives (Bauer, van der
  Wilk & Rasmussen 2016, eqs. 5 and 7), evaluated with scipy's
  ``multivariate_normal.logpdf`` as the reference library;
* gradients against central differences (common practice).
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import central_difference, hard_series, make_series
from scipy.stats import multivariate_normal

import longwave as lw
from longwave import Model, Series
from longwave.kernels import Matern12, Matern32, Matern52
from longwave.methods import FITC, VFE, ChunkedSeries, Exact, resolve

METHODS = [VFE, FITC]


def _kernel(case):
    return {
        "m12": lambda: Matern12(amplitude=1.3, scale=7.0),
        "m32": lambda: Matern32(amplitude=0.8, scale=5.0),
        "m52": lambda: Matern52(amplitude=1.1, scale=9.0),
        "sum": lambda: Matern32(amplitude=1.0, scale=12.0) + Matern12(amplitude=0.4, scale=2.0),
        "prod": lambda: Matern32(amplitude=1.0, scale=6.0) * Matern12(amplitude=0.8, scale=30.0),
        "prod_of_sum": lambda: (Matern32(amplitude=1.0, scale=6.0)
                                + Matern52(amplitude=0.5, scale=3.0))
        * Matern12(amplitude=0.9, scale=40.0),
    }[case]()


KERNELS = ["m12", "m32", "m52", "sum", "prod", "prod_of_sum"]


def _unique_times(series):
    return np.unique(series.t)


@pytest.mark.parametrize("cls", METHODS)
@pytest.mark.parametrize("case", KERNELS)
def test_equals_exact_when_inducing_times_are_the_data_times(cls, case, rng):
    # source: Titsias 2009 sec. 3 / Snelson & Ghahramani 2006: Q = Kff when z = t
    kernel = _kernel(case)
    model = Model(kernel, mean=0.2, excess_noise=0.1)
    series = hard_series(rng, 80, 10.0, 1.0)  # repeated times, gaps, offset 2.46e6
    method = cls(inducing=_unique_times(series), jitter=1e-12)
    exact = Exact().evaluate(model, series, gradient=True)
    ev = method.evaluate(model, series, gradient=True)
    assert ev.value == pytest.approx(exact.value, rel=1e-6)
    np.testing.assert_allclose(ev.grad, exact.grad, rtol=1e-6,
                               atol=1e-6 * np.abs(exact.grad).max())
    tq = np.concatenate([series.t[::7], series.t[:5] + 0.37, [series.t[-1] + 50.0]])
    p_sparse = method.posterior(model, series).predict(tq)
    p_exact = Exact().posterior(model, series).predict(tq)
    np.testing.assert_allclose(p_sparse.mean, p_exact.mean, rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(p_sparse.var, p_exact.var, rtol=1e-6,
                               atol=1e-6 * kernel.variance())


def _dense_reference(model, series, z, jitter):
    """Both objectives and the VFE upper bound by dense algebra (Bauer et al. 2016)."""
    k = model.kernel
    kuu = k(z) + jitter * k.variance() * np.eye(z.size)
    kuf = k(z, series.t)
    q = kuf.T @ np.linalg.solve(kuu, kuf)
    kff = k(series.t)
    lam = model.noise_variance(series.err)
    r = series.y - model.mean_value
    vfe = (multivariate_normal(np.zeros(series.n), q + np.diag(lam)).logpdf(r)
           - 0.5 * np.sum(np.diag(kff - q) / lam))
    fitc = multivariate_normal(np.zeros(series.n),
                               q + np.diag(np.diag(kff - q) + lam)).logpdf(r)
    # Burt, Rasmussen & van der Wilk 2019, eq. 4, with the weighted trace (sparse_objectives)
    t_w = np.sum(np.diag(kff - q) / lam)
    c = q + (1 + t_w) * np.diag(lam)
    _, logdet = np.linalg.slogdet(q + np.diag(lam))
    upper = -0.5 * logdet - 0.5 * r @ np.linalg.solve(c, r) - 0.5 * series.n * np.log(2 * np.pi)
    return vfe, fitc, upper


@pytest.mark.parametrize("case", KERNELS)
def test_objectives_equal_dense_q_formulas(case, rng):
    # source: Bauer, van der Wilk & Rasmussen 2016, eqs. 5 and 7 (dense Q_ff); scipy logpdf
    model = Model(_kernel(case), mean=-0.3, excess_noise=0.05)
    series = make_series(rng, 150, step=0.7)
    z = np.sort(rng.uniform(series.t[0], series.t[-1], 17))
    vfe, fitc, upper = _dense_reference(model, series, z, 1e-8)
    ev_v = VFE(inducing=z).evaluate(model, series)
    ev_f = FITC(inducing=z).evaluate(model, series)
    assert ev_v.value == pytest.approx(vfe, rel=1e-9)
    assert ev_v.extras["upper_bound"] == pytest.approx(upper, rel=1e-9)
    assert ev_f.value == pytest.approx(fitc, rel=1e-9)
    # FITC reports the VFE bounds from its own pass
    assert ev_f.extras["lower_bound"] == pytest.approx(vfe, rel=1e-9)
    assert ev_f.extras["upper_bound"] == pytest.approx(upper, rel=1e-9)
    assert ev_v.extras["bound_gap"] == pytest.approx(upper - vfe, rel=1e-6)


@pytest.mark.parametrize("compiled", [True, False], ids=["numba", "numpy"])
@pytest.mark.parametrize("cls", METHODS)
@pytest.mark.parametrize("case", ["m12", "sum", "prod_of_sum"])
def test_gradient_equals_central_differences(cls, case, compiled, rng):
    # source: central finite differences (common practice); step 1e-5 as in test_gradients.py
    model = Model(_kernel(case), mean=0.2, excess_noise=0.08)
    series = make_series(rng, 200, step=0.5)
    z = np.linspace(series.t[0], series.t[-1], 23)
    method = cls(inducing=z, compiled=compiled)
    ev = method.evaluate(model, series, gradient=True)
    numeric = central_difference(
        lambda x: method.evaluate(model.with_coordinates(x), series).value, model.coordinates())
    np.testing.assert_allclose(ev.grad, numeric, rtol=1e-6, atol=1e-6 * np.abs(numeric).max())


@pytest.mark.parametrize("cls", METHODS)
def test_inducing_time_gradient_equals_central_differences(cls, rng):
    # source: central finite differences (common practice)
    model = Model(_kernel("sum"), mean=0.1, excess_noise=0.1)
    series = make_series(rng, 150, step=0.5)
    z = np.sort(rng.uniform(series.t[0], series.t[-1], 12))
    method = cls(inducing=z)
    _, gz = method.evaluate_inducing(model, series)
    numeric = central_difference(
        lambda zz: cls(inducing=zz).evaluate(model, series).value, z)
    np.testing.assert_allclose(gz, numeric, rtol=1e-6, atol=1e-6 * np.abs(numeric).max())


@pytest.mark.parametrize("cls", METHODS)
def test_chunked_equals_unchunked(cls, rng):
    # source: the statistics are sums over points (sparse_stats), so chunking must not matter
    model = Model(_kernel("sum"), mean=0.1, excess_noise=0.1)
    series = make_series(rng, 301, step=0.5)
    z = np.linspace(series.t[0], series.t[-1], 20)
    whole = cls(inducing=z, chunk=10_000).evaluate(model, series, gradient=True)
    pieces = cls(inducing=z, chunk=7).evaluate(model, series, gradient=True)
    shuffled = rng.permutation(series.n)  # a ChunkedSeries need not be sorted
    source = ChunkedSeries(series.t[shuffled], series.y[shuffled], series.err[shuffled])
    unsorted = cls(inducing=z, chunk=13).evaluate(model, source, gradient=True)
    for ev in (pieces, unsorted):
        assert ev.value == pytest.approx(whole.value, rel=1e-10)
        np.testing.assert_allclose(ev.grad, whole.grad, rtol=1e-10,
                                   atol=1e-10 * np.abs(whole.grad).max())
        assert ev.extras["upper_bound"] == pytest.approx(whole.extras["upper_bound"], rel=1e-10)


def test_without_error_bars_uses_excess_noise_only(rng):
    # source: Model docstring (noise variance = err^2 + excess^2, err = 0 when absent); Exact
    t = np.sort(rng.uniform(0, 30, 60))
    series = Series(t, np.cos(t) + 0.1 * rng.standard_normal(60))
    model = Model(Matern52(amplitude=1.0, scale=3.0), excess_noise=0.1)
    ev = VFE(inducing=t, jitter=1e-12).evaluate(model, series, gradient=True)
    exact = Exact().evaluate(model, series, gradient=True)
    assert ev.value == pytest.approx(exact.value, rel=1e-6)
    np.testing.assert_allclose(ev.grad, exact.grad, rtol=1e-6, atol=1e-6)


def test_fit_through_longwave_fit_approaches_exact_fit(rng):
    # source: VFE hyperparameters approach the exact ones as the bound tightens
    # (Titsias 2009, sec. 4; common practice); reference: Exact fit of the same data
    t = np.sort(rng.uniform(0, 100, 400))
    truth = Model(Matern32(amplitude=1.0, scale=4.0))
    f = np.linalg.cholesky(truth.kernel(t) + 1e-9 * np.eye(t.size)) @ rng.standard_normal(t.size)
    series = Series(t, f + 0.3 * rng.standard_normal(t.size), err=0.3)
    start = Model(Matern32(amplitude=0.5, scale=10.0), mean=0.0)
    exact = lw.fit(start, series, Exact())
    sparse = lw.fit(start, series, VFE(inducing=200, placement="uniform"))
    assert sparse.converged and sparse.method == "vfe"
    for name in ("matern32.amplitude", "matern32.scale"):
        assert sparse.params[name] == pytest.approx(exact.params[name], rel=0.05)
    assert sparse.extras["lower_bound"] <= exact.log_marginal_likelihood
    assert sparse.extras["upper_bound"] >= exact.log_marginal_likelihood


def test_registry_and_options():
    # source: DEVELOPERS.md (REGISTRY is the one name -> class map; options by keyword)
    assert isinstance(resolve("vfe"), VFE) and isinstance(resolve("fitc"), FITC)
    assert resolve("vfe", inducing=32).inducing == 32
    with pytest.raises(TypeError):
        VFE(inducing=8, inducing_points=3)  # unknown keyword
    with pytest.raises(ValueError, match="placement"):
        VFE(placement="everywhere")
    with pytest.raises(ValueError, match="count >= 1"):
        FITC(inducing=0)
    with pytest.raises(ValueError, match="finite"):
        VFE(inducing=[0.0, np.nan])


def test_errors_state_the_rule_and_the_fix(rng):
    series = make_series(rng, 50)
    model = Model(Matern32(amplitude=1.0, scale=3.0))
    with pytest.raises(ValueError, match=r"\.placed\(model, series\)"):
        VFE(inducing=8, placement="greedy").evaluate(model, series)
    placed = VFE(inducing=8, placement="greedy").placed(model, series)
    assert placed.inducing.size == 8
    assert np.isfinite(placed.evaluate(model, series).value)
    no_noise = Series(series.t, series.y)
    with pytest.raises(ValueError, match="excess_noise"):
        VFE(inducing=8).evaluate(model, no_noise)
    with pytest.raises(TypeError, match="ChunkedSeries"):
        VFE(inducing=8).evaluate(model, (series.t, series.y))
