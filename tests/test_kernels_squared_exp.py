"""The squared-exponential kernel and its rational spectral approximation
(``kernels/squared_exp.py``)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from longwave.kernels import SquaredExp
from longwave.kernels.squared_exp import DEFAULT_TOLERANCE, MAX_ORDER, relative_error


def test_dense_value_and_gradient_formula():
    # source: Rasmussen & Williams 2006, eq. 4.9
    kernel = SquaredExp(amplitude=1.5, scale=2.0)
    tau = np.array([0.0, 1.0, 2.0, 6.0])
    np.testing.assert_allclose(kernel.value(tau), 2.25 * np.exp(-tau**2 / 8), rtol=1e-14)


@pytest.mark.parametrize("order", [1, 2, 5, 8, 12])
def test_spectrum_of_the_model_is_the_taylor_rational_spectrum(order):
    # source: Hartikainen & Särkkä 2010, sec. 4: S_N(w) = s2 sqrt(2 pi) l / sum_n x^n / n!,
    # x = l^2 w^2 / 2; the model's spectrum is H (iwI - F)^-1 L Qc L^T (..)^H H^T
    scale, s2 = 1.7, 0.6
    ss = SquaredExp(amplitude=math.sqrt(s2), scale=scale, order=order).state_space()
    assert np.all(np.linalg.eigvals(ss.F).real < 0)  # stable
    for w in [0.0, 0.4, 1.0, 2.5]:
        g = np.linalg.solve(1j * w * np.eye(ss.dim) - ss.F, ss.L)
        model = float(np.real(ss.H @ g @ ss.Qc @ g.conj().T @ ss.H))
        x = scale**2 * w**2 / 2
        taylor = sum(x**n / math.factorial(n) for n in range(order + 1))
        assert model == pytest.approx(s2 * math.sqrt(2 * math.pi) * scale / taylor, rel=1e-8)


def test_error_falls_with_order_and_bound_holds():
    # Särkkä & Piché 2014: the Taylor approximations converge; the bound is exact at
    # tau = 0 because S_N >= S (the Taylor polynomial of exp is below exp)
    tau = np.linspace(0.0, 12.0, 1201)
    errors = []
    for order in range(1, MAX_ORDER + 1):
        kernel = SquaredExp(amplitude=1.0, scale=1.0, order=order)
        ss = kernel.state_space()
        k_ss = np.einsum("a,tab,b->t", ss.H, ss.transition(tau) @ ss.Pinf, ss.H)
        err = np.abs(k_ss - kernel.value(tau)).max()
        assert err <= kernel.covariance_error_bound() * (1 + 1e-5) + 1e-12
        errors.append(err)
    assert np.all(np.diff(errors) < 0)


def test_default_order_meets_tolerance_and_is_smallest():
    kernel = SquaredExp(amplitude=3.0, scale=10.0)
    assert kernel.covariance_error_bound() <= DEFAULT_TOLERANCE * 9.0
    assert relative_error(kernel.order - 1) > DEFAULT_TOLERANCE
    with pytest.raises(ValueError, match="from 1 to"):
        SquaredExp(amplitude=1.0, scale=1.0, order=MAX_ORDER + 1)


def test_fit_with_kalman_approximation_matches_fit_with_exact_dense():
    # the two objectives differ by at most the (small) covariance error, so the
    # optima must be close (common practice: approximate vs exact fits)
    from longwave import Model, Series, fit
    from longwave.methods import Exact, Kalman

    rng = np.random.default_rng(5)
    t = np.sort(rng.uniform(0.0, 50.0, 200))
    truth = SquaredExp(amplitude=1.0, scale=2.0)
    cov = truth(t) + 0.1**2 * np.eye(t.size)
    series = Series(t, np.linalg.cholesky(cov) @ rng.standard_normal(t.size), err=0.1)
    start = Model(SquaredExp(amplitude=0.5, scale=1.0, order=12), mean=0.0)
    exact = fit(start, series, method=Exact())
    kalman = fit(start, series, method=Kalman())
    for name in ["squared_exp.amplitude", "squared_exp.scale"]:
        assert kalman.params[name] == pytest.approx(exact.params[name], rel=0.02)
    assert exact.params["squared_exp.scale"] == pytest.approx(2.0, rel=0.2)
