"""Dense forms and Fourier-series details of ``Periodic`` and ``Cosine``
(``kernels/periodic.py``, ``kernels/cosine.py``)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad

from longwave.kernels import Cosine, Periodic
from longwave.kernels.periodic import DEFAULT_TOLERANCE, default_order, fourier_weights


@pytest.mark.parametrize("period, scale", [(1.0, 1.0), (3.7, 0.4), (250.0, 2.5)])
def test_periodic_equals_warped_squared_exponential(period, scale):
    # source: MacKay 1998, sec. 5.2: map t to u = (cos, sin)(2 pi t / P) and apply a
    # squared exponential of length scale ``scale`` to |u1 - u2|
    rng = np.random.default_rng(7)
    t1, t2 = rng.uniform(-3 * period, 3 * period, (2, 50))
    u1 = np.stack([np.cos(2 * np.pi * t1 / period), np.sin(2 * np.pi * t1 / period)])
    u2 = np.stack([np.cos(2 * np.pi * t2 / period), np.sin(2 * np.pi * t2 / period)])
    expected = 1.7**2 * np.exp(-((u1 - u2) ** 2).sum(axis=0) / (2 * scale**2))
    kernel = Periodic(amplitude=1.7, period=period, scale=scale)
    np.testing.assert_allclose(kernel.value(np.abs(t1 - t2)), expected, rtol=1e-11)
    np.testing.assert_allclose(kernel.value(period * np.arange(5.0)), 1.7**2, rtol=1e-13)


@pytest.mark.parametrize("scale", [0.3, 1.0, 3.0])
def test_fourier_weights_match_numerical_fourier_coefficients(scale):
    # the Bessel-function weights (Solin & Särkkä 2014, eq. 13) against the Fourier
    # coefficients of the dense kernel by quadrature (scipy.integrate.quad):
    # q_j^2 = (2 - [j = 0]) / P * int_0^P k(tau) cos(2 pi j tau / P) dtau
    period = 2.0
    kernel = Periodic(amplitude=1.0, period=period, scale=scale)
    weights, _ = fourier_weights(scale**-2.0, 8)
    for j, w in enumerate(weights):
        coef, _ = quad(lambda x: float(kernel.value(x)), 0.0, period, weight="cos",
                       wvar=2 * math.pi * j / period, limit=200, epsabs=1e-14)
        assert w == pytest.approx((1 if j == 0 else 2) * coef / period, rel=1e-9, abs=1e-14)
    # and the full series sums to the variance (generating function at u = 0)
    full, _ = fourier_weights(scale**-2.0, 200)
    assert full.sum() == pytest.approx(1.0, rel=1e-13)


@pytest.mark.parametrize("scale", [0.15, 0.5, 1.0, 2.0])
def test_error_falls_with_order_and_equals_the_bound(scale):
    # the truncation error of a positive-coefficient cosine series is largest at
    # tau = 0 (a fact of the trade), so the reported bound is attained there
    tau = np.linspace(0.0, 1.0, 101)  # one period suffices: both sides are periodic
    errors, bounds = [], []
    for order in range(0, 30, 3):
        kernel = Periodic(amplitude=1.3, period=1.0, scale=scale, order=order)
        ss = kernel.state_space()
        assert ss.dim == 2 * order + 1
        k_ss = np.einsum("a,tab,b->t", ss.H, ss.transition(tau) @ ss.Pinf, ss.H)
        errors.append(np.abs(k_ss - kernel.value(tau)).max())
        bounds.append(kernel.covariance_error_bound())
    errors, bounds = np.array(errors), np.array(bounds)
    assert np.all(np.diff(bounds) < 0)
    assert np.all(errors <= bounds * (1 + 1e-9) + 1e-14)  # floor: round-off of k
    np.testing.assert_allclose(errors, bounds, rtol=1e-6, atol=1e-14)  # attained at tau = 0


@pytest.mark.parametrize("scale", [0.1, 0.3, 0.7, 1.5, 5.0])
def test_default_order_is_smallest_within_tolerance(scale):
    order = default_order(scale)
    var = 2.0**2
    at = Periodic(amplitude=2.0, period=1.0, scale=scale, order=order)
    assert at.covariance_error_bound() <= DEFAULT_TOLERANCE * var
    if order > 0:
        below = Periodic(amplitude=2.0, period=1.0, scale=scale, order=order - 1)
        assert below.covariance_error_bound() > DEFAULT_TOLERANCE * var
    auto = Periodic(amplitude=2.0, period=1.0, scale=scale)
    assert auto.order_used() == order and auto.state_space().dim == 2 * order + 1


def test_order_follows_the_scale_when_automatic_and_stays_when_given():
    kernel = Periodic(amplitude=1.0, period=1.0, scale=1.0)
    sharper = kernel.with_params([p if i != 2 else p.with_coordinate(math.log(0.2))
                                  for i, p in enumerate(kernel.params())])
    assert sharper.order_used() > kernel.order_used()
    fixed = Periodic(amplitude=1.0, period=1.0, scale=1.0, order=3)
    assert fixed.with_params(fixed.params()).order_used() == 3


def test_bad_order_is_rejected_with_the_rule():
    with pytest.raises(ValueError, match="whole number"):
        Periodic(amplitude=1.0, period=1.0, scale=1.0, order=2.5)
    with pytest.raises(ValueError, match="more than"):
        Periodic(amplitude=1.0, period=1.0, scale=0.005).state_space()


def test_cosine_value_and_variance():
    # k = a^2 cos(2 pi tau / P): a fact of the trade (a random-phase sinusoid)
    kernel = Cosine(amplitude=0.5, period=4.0)
    np.testing.assert_allclose(kernel.value([0.0, 1.0, 2.0, 4.0]), [0.25, 0.0, -0.25, 0.25],
                               atol=1e-15)
    assert kernel.variance() == 0.25


def test_automatic_order_is_continuous_in_scale():
    # the tapered last harmonic makes the state-space covariance continuous where the
    # automatic order steps (module docstring of kernels/periodic.py): just below and
    # above a step the covariances differ only by the scale change itself
    scales = np.geomspace(0.2, 2.0, 400)
    orders = np.array([default_order(s) for s in scales])
    step = int(np.flatnonzero(np.diff(orders))[0])
    tau = np.linspace(0.0, 1.0, 51)

    def k_ss(scale):
        ss = Periodic(amplitude=1.0, period=1.0, scale=scale).state_space()
        return np.einsum("a,tab,b->t", ss.H, ss.transition(tau) @ ss.Pinf, ss.H), ss.dim

    lo, hi = scales[step], scales[step + 1]
    # bisect to the step, then compare the two sides 1e-10 apart
    for _ in range(40):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if default_order(mid) == orders[step] else (lo, mid)
    (a, dim_a), (b, dim_b) = k_ss(lo), k_ss(hi)
    assert dim_a != dim_b
    np.testing.assert_allclose(a, b, rtol=0, atol=1e-8)
    # and the error is the budget exactly, everywhere on the automatic path
    for scale in [0.25, 0.6, 1.4]:
        kernel = Periodic(amplitude=1.5, period=1.0, scale=scale)
        assert kernel.covariance_error_bound() == pytest.approx(DEFAULT_TOLERANCE * 2.25, rel=1e-9)
