"""State-space forms of the periodic-family kernels and of products.

Covers ``kernels/cosine.py``, ``oscillator.py``, ``periodic.py``,
``squared_exp.py`` and ``product_ss.py`` (Kronecker products). Sources:

* ``A(dt) = expm(F dt)`` and ``F Pinf + Pinf F^T + L Qc L^T = 0`` define the
  discrete model (Hartikainen & Särkkä 2010, eqs. 8-10); checked against
  ``scipy.linalg.expm`` and ``scipy.linalg.solve_continuous_lyapunov``.
* ``k(tau) = H A(tau) Pinf H^T`` for ``tau >= 0`` (same source, eq. 11).
* Derivatives against central finite differences (common practice).
* Kalman against dense Exact inference: both compute the same Gaussian
  likelihood (Särkkä 2013, sec. 4.3, prediction-error decomposition).
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import central_difference, hard_series
from scipy.linalg import expm, solve_continuous_lyapunov

from longwave import Model, Series, log_marginal_likelihood, posterior
from longwave.kernels import (
    Cosine,
    Matern12,
    Matern32,
    Matern52,
    Oscillator,
    Periodic,
    SquaredExp,
)
from longwave.methods import Exact, Kalman

# Kernels whose state-space form is exact. Times are in units of about one
# period, so lags up to 12 cover many cycles and several decay times.
EXACT = {
    "cosine": lambda: Cosine(amplitude=1.3, period=1.7),
    "osc-under": lambda: Oscillator(amplitude=0.9, frequency=4.0, quality=5.0),
    "osc-critical": lambda: Oscillator(amplitude=1.1, frequency=2.0, quality=0.5),
    "osc-near-critical": lambda: Oscillator(amplitude=1.0, frequency=2.0, quality=0.500002),
    "osc-over": lambda: Oscillator(amplitude=0.7, frequency=3.0, quality=0.2),
    "matern32*cosine": lambda: Matern32(amplitude=1.2, scale=3.0)
    * Cosine(amplitude=0.8, period=1.1),
    "matern52*cosine": lambda: Matern52(amplitude=1.0, scale=6.0)
    * Cosine(amplitude=1.0, period=2.3),
    "cosine*cosine*matern12": lambda: Cosine(amplitude=1.0, period=2.0)
    * Cosine(amplitude=1.0, period=3.0) * Matern12(amplitude=1.0, scale=4.0),
    "oscillator*cosine": lambda: Oscillator(amplitude=1.0, frequency=1.5, quality=2.0)
    * Cosine(amplitude=1.0, period=0.9),
    "osc+matern32*cosine": lambda: Oscillator(amplitude=0.5, frequency=1.0, quality=0.3)
    + Matern32(amplitude=1.0, scale=5.0) * Cosine(amplitude=1.0, period=1.3),
}
# Approximate forms, with an order high enough that the error is below 1e-12.
HIGH_ORDER = {
    "periodic": lambda: Periodic(amplitude=1.1, period=1.3, scale=0.9, order=18),
    "matern32*periodic": lambda: Matern32(amplitude=1.0, scale=4.0)
    * Periodic(amplitude=1.0, period=1.3, scale=1.0, order=16),
}
# Approximate forms at their default order.
DEFAULT_ORDER = {
    "periodic": lambda: Periodic(amplitude=1.1, period=1.3, scale=0.6),
    "squared_exp": lambda: SquaredExp(amplitude=0.8, scale=1.5),
    "matern52*periodic": lambda: Matern52(amplitude=1.0, scale=5.0)
    * Periodic(amplitude=1.0, period=1.3, scale=0.8),
    "squared_exp+periodic": lambda: SquaredExp(amplitude=0.5, scale=3.0)
    + Periodic(amplitude=1.0, period=1.0, scale=1.2),
}
ALL = {**EXACT, **{f"{k}-high": v for k, v in HIGH_ORDER.items()}, **DEFAULT_ORDER}
LAGS = np.concatenate([[0.0, 1e-7, 1e-3], np.linspace(0.05, 12.0, 240)])


def ss_covariance(ss, tau):
    """``H A(tau) Pinf H^T`` for an array of lags."""
    return np.einsum("a,tab,b->t", ss.H, ss.transition(tau) @ ss.Pinf, ss.H)


def with_coordinates(kernel, coords):
    return kernel.with_params([p.with_coordinate(c) for p, c in zip(kernel.params(), coords)])


def coordinates(kernel):
    return np.array([p.coordinate for p in kernel.params()])


def prior_draw_series(kernel, rng, n=150, span=30.0, err=0.2):
    """Irregular times with a gap and a repeated time; values drawn from the model."""
    t = np.sort(rng.uniform(0.0, span, n))
    t[n // 2 :] += 0.37 * span  # a gap
    t[10] = t[11]  # a repeated time
    cov = kernel(t) + err**2 * np.eye(n)
    y = np.linalg.cholesky(cov) @ rng.standard_normal(n)
    return Series(t, y + 0.1, err)


# --- covariance, transition and stationary covariance ---------------------------
@pytest.mark.parametrize("case", sorted(EXACT))
def test_exact_forms_reproduce_dense_covariance(case):
    kernel = EXACT[case]()
    ss = kernel.state_space()
    var = kernel.variance()
    np.testing.assert_allclose(ss_covariance(ss, LAGS), kernel.value(LAGS), rtol=0,
                               atol=1e-10 * var)
    assert kernel.covariance_error_bound() == 0.0


@pytest.mark.parametrize("case", sorted(DEFAULT_ORDER) + sorted(HIGH_ORDER))
def test_approximate_forms_stay_within_reported_bound(case):
    kernel = {**DEFAULT_ORDER, **HIGH_ORDER}[case]()
    ss = kernel.state_space()
    err = np.abs(ss_covariance(ss, LAGS) - kernel.value(LAGS)).max()
    bound = kernel.covariance_error_bound()
    assert err <= bound * (1 + 1e-6) + 1e-13
    # default orders are chosen for 1e-3 of the variance; sums and products of such
    # parts stay within the sum of the parts' budgets
    assert bound <= 2e-3 * kernel.variance() * len(kernel.leaves())


@pytest.mark.parametrize("case", sorted(ALL))
def test_transition_equals_matrix_exponential(case):
    ss = ALL[case]().state_space()
    for dt in [1e-6, 0.013, 0.4, 1.0, 3.7, 11.0]:
        np.testing.assert_allclose(ss.transition(dt), expm(ss.F * dt), rtol=0, atol=1e-10)


@pytest.mark.parametrize("case", sorted(ALL))
def test_stationary_covariance_solves_lyapunov(case):
    ss = ALL[case]().state_space()
    scale = np.abs(ss.Pinf).max()
    noise = ss.L @ ss.Qc @ ss.L.T
    residual = ss.F @ ss.Pinf + ss.Pinf @ ss.F.T + noise
    np.testing.assert_allclose(residual, 0.0, atol=1e-10 * scale * max(1.0, np.abs(ss.F).max()))
    if np.all(np.linalg.eigvals(ss.F).real < -1e-12):
        # unique solution: compare with scipy's solver
        np.testing.assert_allclose(
            solve_continuous_lyapunov(ss.F, -noise), ss.Pinf, rtol=0, atol=1e-9 * scale
        )
    # Q(dt) = Pinf - A Pinf A^T is a covariance (positive semi-definite)
    for dt in [0.05, 0.9, 7.0]:
        q = ss.process_noise(dt)
        np.testing.assert_allclose(q, q.T, atol=1e-12 * scale)
        assert np.linalg.eigvalsh(q).min() >= -1e-10 * scale


@pytest.mark.parametrize("case", ["cosine", "periodic-high"])
def test_noise_free_rotations_have_zero_process_noise(case):
    # a pure rotation preserves Pinf: Q = Pinf - A Pinf A^T = 0 (fact of the trade:
    # A is orthogonal on each block and Pinf is a multiple of I there)
    ss = ALL[case]().state_space()
    assert np.all(ss.rate == 0.0)
    for dt in [0.1, 1.0, 123.456]:
        np.testing.assert_allclose(ss.process_noise(dt), 0.0, atol=1e-13 * np.abs(ss.Pinf).max())


def test_quasi_periodic_product_adds_damping_and_noise():
    # Matérn x Periodic: every term decays at the Matérn rate, and Q(dt) > 0 (fact
    # of the trade: the product of a damped and a rotating process is damped)
    kernel = Matern32(amplitude=1.0, scale=4.0) * Periodic(amplitude=1.0, period=1.3, scale=1.0)
    ss = kernel.state_space()
    lam = np.sqrt(3) / 4.0
    np.testing.assert_allclose(ss.rate, lam)
    q = ss.process_noise(0.5)
    assert np.trace(q) > 1e-3
    assert np.linalg.eigvalsh(q).min() >= -1e-12


# --- derivatives ------------------------------------------------------------------
@pytest.mark.parametrize("case", sorted(ALL))
def test_transition_and_pinf_derivatives_match_finite_differences(case):
    kernel = ALL[case]()
    x0 = coordinates(kernel)
    ss = kernel.state_space()
    dts = np.array([0.02, 0.7, 2.9])

    def trans(x):
        return with_coordinates(kernel, x).state_space().transition(dts)

    def pinf(x):
        return with_coordinates(kernel, x).state_space().Pinf

    step = 1e-6
    # central differences err by O(step^2 f''') + O(eps f / step): about 1e-8 relative
    np.testing.assert_allclose(ss.transition_grad(dts), central_difference(trans, x0, step),
                               rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(ss.dPinf, central_difference(pinf, x0, step), rtol=1e-6, atol=1e-6)


@pytest.mark.parametrize("case", sorted(ALL))
def test_dense_gradient_matches_finite_differences(case):
    kernel = ALL[case]()
    x0 = coordinates(kernel)
    fd = central_difference(lambda x: with_coordinates(kernel, x).value(LAGS), x0, 1e-6)
    np.testing.assert_allclose(kernel.grad(LAGS), fd, rtol=1e-6, atol=1e-7 * kernel.variance())


# --- Kalman against Exact -----------------------------------------------------------
@pytest.mark.parametrize("case", sorted(EXACT) + [f"{k}-high" for k in HIGH_ORDER])
def test_kalman_matches_exact_likelihood_gradient_and_prediction(case, rng):
    kernel = ALL[case]()
    series = prior_draw_series(kernel, rng)
    model = Model(kernel, mean=0.1, excess_noise=0.05)
    v_k, g_k = log_marginal_likelihood(model, series, method=Kalman(), gradient=True)
    v_e, g_e = log_marginal_likelihood(model, series, method=Exact(), gradient=True)
    assert v_k == pytest.approx(v_e, rel=1e-9, abs=1e-8)
    np.testing.assert_allclose(g_k, g_e, rtol=1e-7, atol=1e-6)
    grid = np.linspace(series.t[0] - 2.0, series.t[-1] + 2.0, 97)
    p_k = posterior(model, series, method=Kalman()).predict(grid)
    p_e = posterior(model, series, method=Exact()).predict(grid)
    var = kernel.variance()
    np.testing.assert_allclose(p_k.mean, p_e.mean, rtol=0, atol=1e-7 * np.sqrt(var))
    np.testing.assert_allclose(p_k.var, p_e.var, rtol=0, atol=1e-7 * var)


@pytest.mark.parametrize("factory", [
    lambda order: Periodic(amplitude=1.0, period=1.3, scale=0.7, order=order),
    lambda order: Matern52(amplitude=1.0, scale=6.0)
    * Periodic(amplitude=1.0, period=1.3, scale=0.7, order=order),
], ids=["periodic", "matern52*periodic"])
def test_kalman_with_fourier_form_converges_to_exact_dense(factory, rng):
    # Exact uses the dense periodic kernel; Kalman its truncated Fourier series.
    # As the order grows the two must meet (Solin & Särkkä 2014, sec. 4).
    series = prior_draw_series(factory(None), rng, n=120)
    grid = np.linspace(series.t[0], series.t[-1], 61)
    exact_model = Model(factory(None), mean=0.1, excess_noise=0.05)
    lml_e = log_marginal_likelihood(exact_model, series, method=Exact())
    pred_e = posterior(exact_model, series, method=Exact()).predict(grid).mean
    gaps = []
    for order in [2, 4, 8, 16]:
        model = Model(factory(order), mean=0.1, excess_noise=0.05)
        lml_k = log_marginal_likelihood(model, series, method=Kalman())
        pred_k = posterior(model, series, method=Kalman()).predict(grid).mean
        gaps.append((abs(lml_k - lml_e), np.abs(pred_k - pred_e).max()))
    gaps = np.array(gaps)
    assert np.all(np.diff(gaps[:, 0]) < 0) and np.all(np.diff(gaps[:, 1]) < 0)
    assert gaps[-1, 0] < 1e-7 and gaps[-1, 1] < 1e-7


def test_kalman_matches_exact_on_hard_series(rng):
    # repeated times, gaps of 1000 scales and a Julian-date offset (conftest.hard_series)
    kernel = Matern32(amplitude=1.0, scale=3.0) * Cosine(amplitude=1.0, period=1.7)
    series = hard_series(rng, 200, 3.0, 1.0)
    model = Model(kernel, mean=0.2, excess_noise=0.1)
    v_k, g_k = log_marginal_likelihood(model, series, method=Kalman(), gradient=True)
    v_e, g_e = log_marginal_likelihood(model, series, method=Exact(), gradient=True)
    assert v_k == pytest.approx(v_e, rel=1e-9)
    np.testing.assert_allclose(g_k, g_e, rtol=1e-6, atol=1e-6)


@pytest.mark.parametrize("case", sorted(DEFAULT_ORDER))
def test_kalman_gradient_matches_finite_differences_at_default_order(case, rng):
    # at the default orders Kalman differs from Exact by the truncation, so its gradient
    # is checked against central differences of its own log-likelihood (common practice);
    # for Periodic this includes the tapered last harmonic of the automatic order
    kernel = DEFAULT_ORDER[case]()
    series = prior_draw_series(kernel, rng, n=80)
    model = Model(kernel, mean=0.1, excess_noise=0.05)
    _, grad = log_marginal_likelihood(model, series, method=Kalman(), gradient=True)
    # five-point central stencil (error O(h^4), common practice): the likelihood bends
    # sharply in the period (50 cycles: third derivative ~1e8), while SquaredExp's filter
    # round-off (~1e-10 of the value) amplifies as 1 / h, so the tolerance allows 1e-4
    x0, h = model.coordinates(), 2e-5

    def lml(x):
        return log_marginal_likelihood(model.with_coordinates(x), series, method=Kalman())

    fd = np.empty(x0.size)
    for i in range(x0.size):
        e = np.zeros(x0.size)
        e[i] = h
        fd[i] = (-lml(x0 + 2 * e) + 8 * lml(x0 + e) - 8 * lml(x0 - e) + lml(x0 - 2 * e)) / (12 * h)
    np.testing.assert_allclose(grad, fd, rtol=1e-5, atol=1e-4)
