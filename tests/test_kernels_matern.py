"""Matérn kernels (``kernels/matern.py``), their sums and products (``kernels/base.py``)
and their state-space forms (``kernels/statespace.py``)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import NoStateSpace, central_difference, kernel_scale
from scipy.linalg import expm, solve_continuous_lyapunov
from scipy.special import gamma, kv

from longwave.kernels import Matern12, Matern32, Matern52, Product, Sum

ORDERS = {Matern12: 0.5, Matern32: 1.5, Matern52: 2.5}


def with_coordinates(kernel, coords):
    """The kernel with every hyperparameter set from its log-coordinate."""
    return kernel.with_params([p.with_coordinate(c) for p, c in zip(kernel.params(), coords)])


def coordinates(kernel):
    return np.array([p.coordinate for p in kernel.params()])


def lags(kernel):
    scale = kernel_scale(kernel)
    return scale * np.array([0.0, 1e-6, 0.03, 0.4, 1.0, 2.7, 8.0, 25.0])


# --- dense form ------------------------------------------------------------------
@pytest.mark.parametrize("cls", list(ORDERS), ids=lambda c: c.__name__)
@pytest.mark.parametrize("amplitude, scale", [(1.0, 1.0), (0.3, 0.01), (25.0, 4.0e3)])
def test_value_equals_general_matern_formula(cls, amplitude, scale):
    # source: Rasmussen & Williams 2006, eq. 4.14 (general Matérn class via the
    # modified Bessel function K_nu), evaluated with scipy.special.kv and gamma
    nu = ORDERS[cls]
    tau = scale * np.array([1e-3, 0.1, 0.5, 1.0, 3.0, 10.0])
    z = math.sqrt(2 * nu) * tau / scale
    expected = amplitude**2 * 2 ** (1 - nu) / gamma(nu) * z**nu * kv(nu, z)
    kernel = cls(amplitude=amplitude, scale=scale)
    np.testing.assert_allclose(kernel.value(tau), expected, rtol=1e-12)
    # k(0) is the variance (limit of eq. 4.14)
    assert kernel.value(0.0) == pytest.approx(amplitude**2, rel=1e-15)
    assert kernel.variance() == pytest.approx(amplitude**2, rel=1e-15)


@pytest.mark.parametrize("cls", list(ORDERS), ids=lambda c: c.__name__)
def test_value_equals_scikit_learn(cls):
    # source: scikit-learn, sklearn.gaussian_process.kernels.Matern (unit variance)
    from sklearn.gaussian_process.kernels import Matern

    t = np.array([0.0, 0.3, 1.1, 2.0, 7.5])
    reference = Matern(length_scale=1.7, nu=ORDERS[cls])(t[:, None])
    np.testing.assert_allclose(cls(amplitude=1.0, scale=1.7)(t), reference, rtol=1e-12)


def test_value_is_even_and_matrix_symmetric(kernel):
    # source: stationarity, k(t1, t2) = k(|t1 - t2|) (definition; common practice)
    tau = lags(kernel)
    np.testing.assert_array_equal(kernel.value(tau), kernel.value(-tau))
    t = np.array([3.0, -1.0, 0.5, 10.0])
    K = kernel(t)
    np.testing.assert_array_equal(K, K.T)
    np.testing.assert_array_equal(kernel(t, t[:2]), K[:, :2])


def test_matrix_is_positive_definite(kernel, rng):
    # source: a covariance function gives PSD Gram matrices (R&W 2006, sec. 4.1)
    t = np.sort(rng.uniform(0, 20 * kernel_scale(kernel), 60))
    assert np.linalg.eigvalsh(kernel(t)).min() > -1e-12 * kernel.variance()


def test_grad_equals_central_differences(kernel):
    # source: central finite differences in the log-coordinates (common practice);
    # step 1e-5 gives truncation ~1e-10 and round-off ~1e-11 relative
    tau = lags(kernel)
    analytic = kernel.grad(tau)
    numeric = central_difference(lambda x: with_coordinates(kernel, x).value(tau),
                                 coordinates(kernel))
    np.testing.assert_allclose(analytic, numeric, rtol=1e-7, atol=1e-9 * kernel.variance())
    assert analytic.shape == (kernel.n_params,) + tau.shape


def test_product_value_and_grad():
    # source: product rule and central differences (common practice)
    kernel = Matern32(amplitude=1.2, scale=3.0) * Matern12(amplitude=0.7, scale=10.0)
    assert isinstance(kernel, Product)
    tau = np.array([0.0, 0.5, 2.0, 9.0])
    expected = Matern32(amplitude=1.2, scale=3.0).value(tau) * Matern12(
        amplitude=0.7, scale=10.0).value(tau)
    np.testing.assert_allclose(kernel.value(tau), expected, rtol=1e-14)
    numeric = central_difference(lambda x: with_coordinates(kernel, x).value(tau),
                                 coordinates(kernel))
    np.testing.assert_allclose(kernel.grad(tau), numeric, rtol=1e-7, atol=1e-12)


# --- sums, labels, immutability ----------------------------------------------------------
def test_sum_flattens_and_labels_repeated_kernels():
    # source: kernels/base.py contract (repeated labels become label_2, label_3)
    kernel = Matern32(amplitude=1.0, scale=2.0) + Matern32(amplitude=0.5, scale=7.0) + Matern12(
        amplitude=0.1, scale=1.0)
    assert isinstance(kernel, Sum) and len(kernel.parts) == 3
    assert kernel.param_names == [
        "matern32.amplitude", "matern32.scale",
        "matern32_2.amplitude", "matern32_2.scale",
        "matern12.amplitude", "matern12.scale",
    ]
    tau = np.array([0.0, 1.0, 4.0])
    expected = sum(part.value(tau) for part in kernel.parts)
    np.testing.assert_allclose(kernel.value(tau), expected, rtol=1e-15)
    assert kernel.variance() == pytest.approx(1.0 + 0.25 + 0.01, rel=1e-15)


def test_custom_label_names_parameters():
    kernel = Matern52(amplitude=1.0, scale=2.0, label="slow")
    assert kernel.param_names == ["slow.amplitude", "slow.scale"]


def test_with_params_returns_new_kernel(kernel):
    # source: kernels are immutable specifications (kernels/base.py docstring)
    before = [p.value for p in kernel.params()]
    doubled = kernel.with_params([p.with_coordinate(p.coordinate + math.log(2))
                                  for p in kernel.params()])
    assert [p.value for p in kernel.params()] == before
    np.testing.assert_allclose([p.value for p in doubled.params()], 2 * np.array(before))
    assert doubled.param_names == kernel.param_names


def test_rate_property():
    # source: lam = sqrt(2 nu) / scale (R&W 2006, eq. 4.17)
    assert Matern52(amplitude=1.0, scale=2.0).rate == pytest.approx(math.sqrt(5) / 2)


# --- bad input -------------------------------------------------------------------
@pytest.mark.parametrize(
    "kwargs, exc, words",
    [
        ({"amplitude": 1.0, "scale": 1.0, "period": 2.0}, TypeError,
         ["unknown hyperparameter", "period", "amplitude", "scale"]),
        ({"amplitude": 1.0}, TypeError, ["needs hyperparameter", "scale", "scale=1.0"]),
        ({"amplitude": -1.0, "scale": 1.0}, ValueError, ["matern32.amplitude", "positive", "-1.0"]),
        ({"amplitude": 1.0, "scale": 0.0}, ValueError, ["matern32.scale", "positive", "0.0"]),
        ({"amplitude": 1.0, "scale": float("nan")}, ValueError, ["matern32.scale", "finite"]),
        ({"amplitude": "big", "scale": 1.0}, TypeError, ["matern32.amplitude", "number", "str"]),
        ({"amplitude": 1.0, "scale": [2.0]}, TypeError, ["matern32.scale", "number", "list"]),
    ],
    ids=["unknown", "missing", "negative", "zero", "nan", "string", "list"],
)
def test_bad_hyperparameters_raise_clear_errors(kwargs, exc, words):
    with pytest.raises(exc) as info:
        Matern32(**kwargs)
    for word in words:
        assert word in str(info.value)


def test_sum_with_non_kernel_is_rejected():
    with pytest.raises(TypeError):
        Matern32(amplitude=1.0, scale=1.0) + 1.0


def test_kernel_without_state_space_says_so():
    # source: kernels/base.py contract; Kalman must refuse such a kernel by name
    from longwave import Model, Series
    from longwave.methods import Kalman

    toy = NoStateSpace(amplitude=1.0, scale=2.0)
    assert not toy.has_state_space
    assert not (toy + Matern32(amplitude=1.0, scale=1.0)).has_state_space
    with pytest.raises(NotImplementedError, match="no state-space form"):
        toy.state_space()
    with pytest.raises(ValueError, match="no exact state-space form"):
        Kalman().check(Model(toy), Series([0.0, 1.0], [0.0, 1.0], err=0.1))
    # and its analytic gradient is right (the pattern every new kernel follows)
    tau = np.array([0.0, 0.5, 3.0])
    numeric = central_difference(lambda x: with_coordinates(toy, x).value(tau), coordinates(toy))
    np.testing.assert_allclose(toy.grad(tau), numeric, rtol=1e-7, atol=1e-12)


# --- state-space form ------------------------------------------------------------
def steps(kernel):
    return kernel_scale(kernel) * np.array([0.0, 1e-4, 0.05, 0.5, 1.0, 3.0, 20.0])


def test_transition_equals_matrix_exponential(kernel):
    # source: A(dt) = expm(F dt) (Hartikainen & Särkkä 2010, eq. 12), scipy.linalg.expm
    ss = kernel.state_space()
    for dt in steps(kernel):
        np.testing.assert_allclose(ss.transition(dt), expm(ss.F * dt), rtol=1e-10,
                                   atol=1e-12 * np.abs(expm(ss.F * dt)).max())
    stacked = ss.transition(steps(kernel))
    assert stacked.shape == (steps(kernel).size, ss.dim, ss.dim)


def test_stationary_covariance_solves_lyapunov(kernel):
    # source: F P + P F^T + L Qc L^T = 0 (Hartikainen & Särkkä 2010, sec. 3),
    # scipy.linalg.solve_continuous_lyapunov
    ss = kernel.state_space()
    expected = solve_continuous_lyapunov(ss.F, -ss.L @ ss.Qc @ ss.L.T)
    np.testing.assert_allclose(ss.Pinf, expected, rtol=1e-10, atol=1e-12 * np.abs(expected).max())
    # symmetric to round-off (scipy's Lyapunov solution is not exactly symmetric)
    np.testing.assert_allclose(ss.Pinf, ss.Pinf.T, rtol=0, atol=1e-15 * np.abs(ss.Pinf).max())
    assert np.linalg.eigvalsh(ss.Pinf).min() > 0


def test_state_space_reproduces_covariance(kernel):
    # source: k(tau) = H A(tau) Pinf H^T for a stationary linear SDE
    # (Hartikainen & Särkkä 2010, sec. 3)
    ss = kernel.state_space()
    tau = lags(kernel)
    from_states = np.array([ss.H @ ss.transition(t) @ ss.Pinf @ ss.H for t in tau])
    np.testing.assert_allclose(from_states, kernel.value(tau), rtol=1e-10,
                               atol=1e-14 * kernel.variance())


def test_process_noise_equals_van_loan_integral(kernel):
    # source: Q(dt) = int_0^dt expm(F s) L Qc L^T expm(F s)^T ds, computed by the
    # matrix-exponential method of Van Loan 1978 ("Computing integrals involving
    # the matrix exponential", Theorem 1) with scipy.linalg.expm
    # Van Loan's block exponential contains expm(-F dt), which grows like
    # exp(rate dt), so it is accurate only for steps up to a few of the shortest
    # length scale (relative error ~ eps exp(2 rate dt)); larger steps are covered
    # by the expm test of A and Q = Pinf - A Pinf A^T.
    ss = kernel.state_space()
    d = ss.dim
    shortest = min(leaf.params()[1].value for leaf in kernel.leaves())
    for dt in shortest * np.array([1e-4, 0.05, 0.5, 1.0, 2.0]):
        block = np.zeros((2 * d, 2 * d))
        block[:d, :d] = -ss.F
        block[:d, d:] = ss.L @ ss.Qc @ ss.L.T
        block[d:, d:] = ss.F.T
        e = expm(block * dt)
        expected = e[d:, d:].T @ e[:d, d:]
        np.testing.assert_allclose(ss.process_noise(dt), expected, rtol=1e-8,
                                   atol=1e-10 * np.abs(ss.Pinf).max())


def state_space_at(kernel, coords):
    return with_coordinates(kernel, coords).state_space()


@pytest.mark.parametrize("what", ["transition", "process_noise"])
def test_transition_and_noise_derivatives_equal_central_differences(kernel, what):
    # source: central finite differences in the log-coordinates (common practice)
    ss = kernel.state_space()
    dts = steps(kernel)
    analytic = ss.transition_grad(dts) if what == "transition" else ss.process_noise_grad(dts)
    assert analytic.shape == (kernel.n_params, dts.size, ss.dim, ss.dim)
    numeric = central_difference(lambda x: getattr(state_space_at(kernel, x), what)(dts),
                                 coordinates(kernel), step=1e-6)
    np.testing.assert_allclose(analytic, numeric, rtol=1e-6, atol=1e-8 * np.abs(ss.Pinf).max())


def test_stationary_covariance_derivatives_equal_central_differences(kernel):
    # source: central finite differences in the log-coordinates (common practice)
    ss = kernel.state_space()
    numeric = central_difference(lambda x: state_space_at(kernel, x).Pinf, coordinates(kernel),
                                 step=1e-6)
    np.testing.assert_allclose(ss.dPinf, numeric, rtol=1e-6, atol=1e-8 * np.abs(ss.Pinf).max())


def test_sum_state_space_is_block_diagonal():
    # source: a sum of independent processes stacks their states (Hartikainen & Särkkä 2010)
    a, b = Matern52(amplitude=1.0, scale=3.0), Matern12(amplitude=0.5, scale=1.0)
    ss = (a + b).state_space()
    sa, sb = a.state_space(), b.state_space()
    assert ss.dim == 4 and ss.n_params == 4
    np.testing.assert_array_equal(ss.Pinf[:3, :3], sa.Pinf)
    np.testing.assert_array_equal(ss.Pinf[3:, 3:], sb.Pinf)
    assert not ss.Pinf[:3, 3:].any()
    np.testing.assert_array_equal(ss.H, np.concatenate([sa.H, sb.H]))
    # derivatives of one part vanish in the other's block
    assert not ss.dPinf[:2, 3:, 3:].any() and not ss.dPinf[2:, :3, :3].any()
    np.testing.assert_allclose(ss.transition(0.7)[:3, :3], sa.transition(0.7), rtol=1e-15)
    np.testing.assert_allclose(ss.transition(0.7)[3:, 3:], sb.transition(0.7), rtol=1e-15)
