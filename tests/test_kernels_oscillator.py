"""The damped harmonic oscillator kernel (``kernels/oscillator.py``)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.linalg import expm

from longwave.kernels import Matern32, Oscillator
from longwave.kernels.oscillator import NEAR_CRITICAL, _regime

TAU = np.concatenate([[0.0, 1e-6], np.linspace(0.01, 15.0, 300)])


@pytest.mark.parametrize("quality", [0.05, 0.3, 0.5, 0.5 * (1 + 1e-9), 0.7, 2.0, 40.0])
def test_dense_value_equals_expm_of_the_sde(quality):
    # source: the SDE f'' + (w0/Q) f' + w0^2 f = w itself: k(tau) = [expm(F tau) Pinf]_00
    # with Pinf = diag(s2, w0^2 s2) (Hartikainen & Särkkä 2010, eq. 11), scipy.linalg.expm
    w0, s2 = 1.7, 0.8
    f = np.array([[0.0, 1.0], [-w0 * w0, -w0 / quality]])
    pinf = np.diag([s2, w0 * w0 * s2])
    expected = np.array([(expm(f * t) @ pinf)[0, 0] for t in TAU])
    kernel = Oscillator(amplitude=math.sqrt(s2), frequency=w0, quality=quality)
    np.testing.assert_allclose(kernel.value(TAU), expected, rtol=0, atol=1e-12)


@pytest.mark.parametrize("quality", [0.2, 0.5, 3.0])
def test_spectral_density_is_the_driven_oscillator_response(quality):
    # a fact of the trade (linear response): a white-noise-driven oscillator has
    # S(w) = q / ((w0^2 - w^2)^2 + (w0 w / Q)^2), q = 2 (w0/Q) w0^2 s2, and
    # S(w) = 2 int_0^inf k(tau) cos(w tau) dtau (Wiener-Khinchin), scipy.integrate.quad
    w0, s2 = 2.0, 1.0
    kernel = Oscillator(amplitude=1.0, frequency=w0, quality=quality)
    q = 2 * (w0 / quality) * w0 * w0 * s2
    for w in [0.3, 1.5, 2.0, 4.0]:
        numeric, _ = quad(lambda t: float(kernel.value(t)), 0, 200, weight="cos", wvar=w,
                          limit=400)
        expected = q / ((w0 * w0 - w * w) ** 2 + (w0 * w / quality) ** 2)
        assert 2 * numeric == pytest.approx(expected, rel=1e-6)


def test_critical_damping_is_matern32():
    # fact of the trade: at Q = 1/2 the covariance is s2 (1 + w0 tau) e^{-w0 tau},
    # a Matérn-3/2 kernel of scale sqrt(3) / w0
    w0 = 2.5
    osc = Oscillator(amplitude=1.3, frequency=w0, quality=0.5)
    np.testing.assert_allclose(
        osc.value(TAU), Matern32(amplitude=1.3, scale=math.sqrt(3) / w0).value(TAU), rtol=1e-13
    )


def test_state_space_is_continuous_across_the_regimes():
    # the split (trigonometric / hyperbolic) forms and the series form must agree at
    # the edges of the near-critical band, in value and in every derivative
    dts = np.array([0.01, 0.5, 2.0, 9.0])
    edge = 0.5 * math.sqrt(1 + NEAR_CRITICAL)  # |1 - 4 Q^2| = NEAR_CRITICAL
    low = 0.5 * math.sqrt(1 - NEAR_CRITICAL)
    for q_in, q_out in [(edge * (1 - 1e-14), edge * (1 + 1e-14)),
                        (low * (1 + 1e-14), low * (1 - 1e-14))]:
        inside = Oscillator(amplitude=1.0, frequency=2.0, quality=q_in)
        outside = Oscillator(amplitude=1.0, frequency=2.0, quality=q_out)
        assert _regime(q_in) == "series" and _regime(q_out) != "series"
        a, b = inside.state_space(), outside.state_space()
        np.testing.assert_allclose(a.transition(dts), b.transition(dts), rtol=0, atol=1e-10)
        np.testing.assert_allclose(a.transition_grad(dts), b.transition_grad(dts),
                                   rtol=0, atol=1e-7)


def test_period_property():
    assert Oscillator(amplitude=1.0, frequency=2 * math.pi / 5.0, quality=3.0).period == \
        pytest.approx(5.0)


def test_fit_recovers_the_frequency_of_a_simulated_oscillator():
    # common practice: parameter recovery on data drawn from the model itself
    from longwave import Model, Series, fit
    from longwave.methods import Kalman

    rng = np.random.default_rng(11)
    t = np.sort(rng.uniform(0.0, 200.0, 500))
    truth = Oscillator(amplitude=1.0, frequency=1.3, quality=8.0)
    cov = truth(t) + 0.2**2 * np.eye(t.size)
    series = Series(t, np.linalg.cholesky(cov) @ rng.standard_normal(t.size), err=0.2)
    start = Oscillator(amplitude=0.7, frequency=1.0, quality=3.0)
    result = fit(Model(start, mean=0.0), series, method=Kalman())
    assert result.converged
    # the covariance oscillates for ~Q/pi cycles per decay time; 500 points over
    # ~40 cycles pin w0 to well under 5 % (a fact of spectral estimation)
    assert result.params["oscillator.frequency"] == pytest.approx(1.3, rel=0.05)
    assert 2.0 < result.params["oscillator.quality"] < 30.0
