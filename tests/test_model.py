"""The model (``model.py``): parameter order, coordinates, noise, mean and priors."""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import central_difference

from longwave import LogNormal, Model, Normal, Param, fixed
from longwave.kernels import Matern12, Matern32


def full_model():
    kernel = Matern32(amplitude=1.5, scale=Param(4.0, bounds=(0.5, 50.0))) + Matern12(
        amplitude=fixed(0.3), scale=20.0)
    return Model(kernel, mean=0.25, excess_noise=0.1)


def test_parameter_order_is_kernel_then_mean_then_noise():
    # source: DEVELOPERS.md, "Data and parameters"
    model = full_model()
    assert model.names == ["matern32.amplitude", "matern32.scale", "matern12.amplitude",
                           "matern12.scale", "mean", "excess_noise"]
    assert model.free_names == ["matern32.amplitude", "matern32.scale", "matern12.scale",
                                "mean", "excess_noise"]
    np.testing.assert_array_equal(model.free_mask, [True, True, False, True, True, True])
    assert model.n_kernel_params == 4
    assert Model(Matern32(amplitude=1.0, scale=1.0)).names[-1] == "mean"


def test_coordinates_and_bounds():
    model = full_model()
    np.testing.assert_allclose(
        model.coordinates(),
        [math.log(1.5), math.log(4.0), math.log(20.0), 0.25, math.log(0.1)], rtol=1e-15)
    bounds = model.coordinate_bounds()
    assert bounds[1] == pytest.approx((math.log(0.5), math.log(50.0)))
    assert bounds[0] == (None, None) and bounds[3] == (None, None)


def test_with_coordinates_round_trip_and_immutability():
    model = full_model()
    x = model.coordinates() + np.array([0.1, -0.2, 0.3, 1.0, -0.5])
    moved = model.with_coordinates(x)
    np.testing.assert_allclose(moved.coordinates(), x, rtol=1e-15)
    assert moved.values()["matern12.amplitude"] == 0.3      # fixed: untouched
    assert model.values()["mean"] == 0.25                   # original unchanged
    assert moved.values()["mean"] == pytest.approx(1.25)
    assert moved.names == model.names
    assert moved.mean.positive is False and moved.excess_noise.positive is True


def test_with_coordinates_checks_the_shape():
    with pytest.raises(ValueError) as info:
        full_model().with_coordinates([0.0, 1.0])
    for word in ["expected 5 free coordinates", "matern32.amplitude", "(2,)"]:
        assert word in str(info.value)


@pytest.mark.parametrize("mean", [fixed(-0.5), fixed(0.0), Param(-2.0, bounds=(-5.0, 5.0)),
                                  -3, 0])
def test_mean_takes_any_real_value(mean):
    # Model docstring: the mean is a location, fitted unless Param(value, fixed=True)
    model = Model(Matern32(amplitude=1.0, scale=1.0), mean=mean)
    expected = mean.value if isinstance(mean, Param) else float(mean)
    assert model.mean_value == expected
    assert model.mean.positive is False
    assert ("mean" in model.free_names) is not model.mean.fixed
    if not model.mean.fixed:
        assert model.coordinates()[-1] == expected  # a location: its own coordinate


@pytest.mark.parametrize("noise, words", [
    (0.0, ["'excess_noise'", "must be positive"]),
    (fixed(-0.1), ["'excess_noise'", "must be positive", "-0.1"]),
    ("0.1", ["'excess_noise'", "must be a number"]),
])
def test_bad_excess_noise(noise, words):
    with pytest.raises((ValueError, TypeError)) as info:
        Model(Matern32(amplitude=1.0, scale=1.0), excess_noise=noise)
    for word in words:
        assert word in str(info.value)


def test_kernel_must_be_a_kernel():
    with pytest.raises(TypeError, match="kernel must be a longwave kernel, got function.*Model"):
        Model(lambda tau: tau)


def test_noise_variance_and_its_gradient():
    # source: e_i ~ N(0, err_i^2 + excess^2) (model.py docstring); gradient by central
    # differences in the free coordinates (common practice)
    model = full_model()
    err = np.array([0.1, 0.2, 0.0])
    np.testing.assert_allclose(model.noise_variance(err), err**2 + 0.01, rtol=1e-15)
    numeric = central_difference(lambda x: model.with_coordinates(x).excess_variance,
                                 model.coordinates())
    np.testing.assert_allclose(model.noise_variance_grad()[model.free_mask], numeric,
                               rtol=1e-8, atol=1e-12)
    assert Model(Matern32(amplitude=1.0, scale=1.0)).excess_variance == 0.0


def test_mean_gradient():
    model = full_model()
    numeric = central_difference(lambda x: model.with_coordinates(x).mean_value,
                                 model.coordinates())
    np.testing.assert_allclose(model.mean_grad()[model.free_mask], numeric, rtol=1e-9,
                               atol=1e-12)


def test_log_prior_sums_free_parameters_only():
    # source: scipy.stats.norm.logpdf, summed over the free parameters with priors
    from scipy.stats import norm

    kernel = Matern32(amplitude=Param(1.5, prior=LogNormal(1.0, 0.5)),
                      scale=Param(4.0, fixed=True, prior=LogNormal(2.0, 0.1)))
    model = Model(kernel, mean=Param(0.3, prior=Normal(0.0, 2.0)), excess_noise=0.1)
    total, grad = model.log_prior()
    expected = norm(0.0, 0.5).logpdf(math.log(1.5)) + norm(0.0, 2.0).logpdf(0.3)
    assert total == pytest.approx(expected, rel=1e-13)
    assert grad.shape == (3,)  # amplitude, mean, excess_noise
    numeric = central_difference(lambda x: model.with_coordinates(x).log_prior()[0],
                                 model.coordinates())
    np.testing.assert_allclose(grad, numeric, rtol=1e-8, atol=1e-10)


def test_repr():
    assert repr(full_model()) == (
        "Model((Matern32(amplitude=1.5, scale=4) + Matern12(amplitude=0.3, scale=20)), "
        "mean=0.25, excess_noise=0.1)")
