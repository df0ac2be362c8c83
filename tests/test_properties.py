"""Property-based tests (hypothesis) over random kernels, data and extremes.

Draws: one or two Matérn terms (orders 1/2, 3/2, 5/2) with amplitudes 0.1-10,
length scales from 1e-3 to 1e3 times the median time step, error bars from
1e-6 to 1e2 times the prior standard deviation, 2-60 points with exponential
steps, sometimes repeated times, sometimes an offset of 2.46e6.

What is checked, and with what tolerance:

* Kalman is finite everywhere (value, gradient, posterior), and its posterior
  variance lies in [0, k(0)].
* Kalman equals Exact where the dense problem is well enough conditioned for
  the dense result to be a reference. Both are backward stable, so their
  difference grows with kappa = cond(K + diag(noise)) (Higham 2002,
  "Accuracy and Stability of Numerical Algorithms", ch. 10 on Cholesky):
  values within (1e-12 + 1e-14 kappa) max(1, |value|), posterior means within
  (1e-12 + 1e-12 kappa) of the prior standard deviation and variances within
  (1e-12 + 1e-13 kappa) of the prior variance, for kappa <= 1e10. The
  gradient, ``r^T K^-1 dK K^-1 r / 2 - tr(K^-1 dK) / 2``, has two factors of
  K^-1 and degrades like kappa^2, so it is compared within
  (1e-10 + 1e-14 kappa^2) max(1, |grad|) for kappa <= 1e6 only. (The
  constants are ~40x the worst seen over 3000 random draws of this strategy.)
* The filtered and smoothed covariances from the compiled loops are exactly
  symmetric and positive semidefinite to within 1e-12 of the largest
  eigenvalue of Pinf.
"""

from __future__ import annotations

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from longwave import Model, Param, Series
from longwave._loops import kalman as loops
from longwave.kernels import Matern12, Matern32, Matern52
from longwave.methods import Exact, Kalman

SETTINGS = settings(max_examples=120, deadline=None, derandomize=True,
                    suppress_health_check=[HealthCheck.too_slow])
ORDERS = [Matern12, Matern32, Matern52]


def decades(lo, hi):
    """Base-10 exponents in [lo, hi], spread evenly over the decades.

    hypothesis favours simple floats near 0, which would leave the extreme
    length scales and error bars rare; a whole decade plus a fraction is not.
    """
    return st.builds(lambda k, f: min(k + f, hi), st.integers(lo, hi - 1), st.floats(0, 1))


@st.composite
def problems(draw):
    """(model, series, query times) from the strategy in the module docstring."""
    seed = draw(st.integers(0, 2**32 - 1))
    n = draw(st.integers(2, 60))
    n_terms = draw(st.integers(1, 2))
    classes = draw(st.lists(st.sampled_from(ORDERS), min_size=n_terms, max_size=n_terms))
    log_scales = draw(st.lists(decades(-3, 3), min_size=n_terms, max_size=n_terms))
    log_amps = draw(st.lists(decades(-1, 1), min_size=n_terms, max_size=n_terms))
    log_err = draw(decades(-6, 2))
    repeated = draw(st.booleans())
    offset = draw(st.sampled_from([0.0, 2.46e6]))

    rng = np.random.default_rng(seed)
    steps = rng.exponential(1.0, n - 1)
    if repeated:
        steps[rng.random(n - 1) < 0.25] = 0.0
    t = offset + np.concatenate([[0.0], np.cumsum(steps)])
    positive = np.diff(t)[np.diff(t) > 0]
    median_step = float(np.median(positive)) if positive.size else 1.0
    terms = [cls(amplitude=10.0**a, scale=median_step * 10.0**s)
             for cls, a, s in zip(classes, log_amps, log_scales)]
    kernel = terms[0] if n_terms == 1 else terms[0] + terms[1]
    amplitude = float(np.sqrt(kernel.variance()))
    err = amplitude * 10.0**log_err * rng.uniform(1.0, 3.0, n)
    y = 0.3 + amplitude * rng.standard_normal(n)
    series = Series(t, y, err)
    queries = np.concatenate([
        series.t, series.t[:-1] + 0.5 * np.diff(series.t),
        [series.t[0] - median_step, series.t[-1] + median_step],
    ])
    return Model(kernel, mean=0.3), series, queries


def condition(model, series):
    K = model.kernel(series.t)
    K[np.diag_indices_from(K)] += model.noise_variance(series.err)
    return float(np.linalg.cond(K))


@SETTINGS
@given(problems())
def test_kalman_is_finite_and_variances_bounded(problem):
    model, series, queries = problem
    ev = Kalman().evaluate(model, series, gradient=True)
    assert np.isfinite(ev.value) and np.all(np.isfinite(ev.grad))
    pred = Kalman().posterior(model, series).predict(queries)
    assert np.all(np.isfinite(pred.mean)) and np.all(np.isfinite(pred.var))
    prior = model.kernel.variance()
    assert np.all(pred.var >= 0) and np.all(pred.var <= prior * (1 + 1e-9))


@SETTINGS
@given(problems())
def test_kalman_equals_exact_within_conditioning(problem):
    model, series, queries = problem
    kappa = condition(model, series)
    if kappa > 1e10:
        return  # the dense reference itself has fewer than ~6 correct digits
    kal, ex = Kalman().evaluate(model, series, gradient=True), Exact().evaluate(
        model, series, gradient=True)
    assert abs(kal.value - ex.value) <= (1e-12 + 1e-14 * kappa) * max(1.0, abs(ex.value))
    if kappa <= 1e6:
        tol = (1e-10 + 1e-14 * kappa**2) * max(1.0, np.abs(ex.grad).max())
        assert np.abs(kal.grad - ex.grad).max() <= tol
    pk = Kalman().posterior(model, series).predict(queries)
    pe = Exact().posterior(model, series).predict(queries)
    prior = model.kernel.variance()
    assert np.abs(pk.mean - pe.mean).max() <= (1e-12 + 1e-12 * kappa) * np.sqrt(prior)
    assert np.abs(pk.var - pe.var).max() <= (1e-12 + 1e-13 * kappa) * prior


@SETTINGS
@given(problems())
def test_filtered_and_smoothed_covariances_are_symmetric_psd(problem):
    model, series, _ = problem
    ss = model.kernel.state_space()
    n, d = series.n, ss.dim
    trans = (ss.rate, ss.freq, ss.cos_coef, ss.sin_coef)
    mf, Pf = np.empty((n, d)), np.empty((n, d, d))
    ms, Ps = np.empty((n, d)), np.empty((n, d, d))
    loops.filter_store(series.t, series.y - model.mean_value, model.noise_variance(series.err),
                       ss.H, ss.Pinf, trans, mf, Pf)
    loops.smooth(series.t, ss.Pinf, trans, mf, Pf, ms, Ps)
    floor = -1e-12 * np.linalg.eigvalsh(ss.Pinf).max()
    for means, covs in [(mf, Pf), (ms, Ps)]:
        assert np.all(np.isfinite(means)) and np.all(np.isfinite(covs))
        np.testing.assert_array_equal(covs, np.swapaxes(covs, 1, 2))
        assert np.linalg.eigvalsh(covs).min() >= floor


# --- cheap properties of the inputs -------------------------------------------------
@settings(max_examples=200, deadline=None, derandomize=True)
@given(st.lists(st.integers(-5, 5), min_size=1, max_size=40))
def test_series_sort_is_stable_and_order_maps_back(times):
    # source: numpy.argsort(kind="stable") semantics
    t = np.asarray(times, dtype=float)
    y = np.arange(t.size, dtype=float)  # the input position, to see stability
    s = Series(t, y, 0.1)
    assert np.all(np.diff(s.t) >= 0)
    np.testing.assert_array_equal(t[s.order], s.t)
    np.testing.assert_array_equal(s.y, s.order)
    for value in np.unique(t):  # equal times keep their input order
        assert np.all(np.diff(s.y[s.t == value]) > 0)


@settings(max_examples=200, deadline=None, derandomize=True)
@given(st.floats(-30, 30), st.booleans())
def test_param_coordinate_round_trip(coordinate, positive):
    p = Param(1.0, positive=positive).with_coordinate(coordinate)
    assert np.isclose(p.coordinate, coordinate, rtol=1e-14, atol=1e-14)
    if positive:
        assert p.value > 0
