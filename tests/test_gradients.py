"""Analytic gradients of every registered inference method against central differences.

Source: central finite differences of the method's own value in the free
coordinates (common practice). Step 1e-5: the truncation error is
~ h^2 |f'''| / 6 ~ 1e-10 and the round-off ~ eps |f| / h ~ 1e-16 * 300 / 1e-5
= 3e-9 for log-likelihoods of a few hundred, so the analytic gradient must
match to 1e-6 relative (floor 1e-6 times the largest component).

Every method in ``methods.REGISTRY`` is run with its default options; one
that cannot handle a case says so through ``check`` and the case is skipped
(a test-side decision, so new methods are covered as soon as they register).
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import central_difference, hard_series, kernel_amplitude, kernel_scale, make_kernel

from longwave import LogNormal, Model, Normal, Param, log_marginal_likelihood
from longwave.kernels import Matern12, Matern32
from longwave.methods import REGISTRY, resolve

KERNELS = {
    "matern12": lambda: make_kernel("matern12"),
    "matern32": lambda: make_kernel("matern32"),
    "matern52": lambda: make_kernel("matern52"),
    "matern32+matern12": lambda: make_kernel("matern32+matern12"),
    "matern32*matern12": lambda: Matern32(amplitude=1.0, scale=6.0)
    * Matern12(amplitude=0.8, scale=30.0),
}


def model_for(kernel, parameters):
    """Models over which the gradient is taken (free and fixed mixes, with and without noise)."""
    amp = kernel_amplitude(kernel)
    if parameters == "all free":
        return Model(kernel, mean=0.2, excess_noise=0.1 * amp)
    if parameters == "some fixed":
        params = kernel.params()
        params[0] = Param(params[0].value, fixed=True)
        return Model(kernel.with_params(params), mean=Param(0.2, fixed=True, positive=False),
                     excess_noise=0.1 * amp)
    if parameters == "no excess noise":
        return Model(kernel, mean=-0.1)
    if parameters == "kernel fixed":
        held = kernel.with_params([Param(p.value, fixed=True) for p in kernel.params()])
        return Model(held, mean=0.2, excess_noise=0.1 * amp)
    raise AssertionError(parameters)


@pytest.mark.parametrize("parameters",
                         ["all free", "some fixed", "no excess noise", "kernel fixed"])
@pytest.mark.parametrize("kernel_id", sorted(KERNELS))
@pytest.mark.parametrize("method_name", sorted(REGISTRY))
def test_gradient_equals_central_differences(method_name, kernel_id, parameters, rng):
    kernel = KERNELS[kernel_id]()
    model = model_for(kernel, parameters)
    series = hard_series(rng, 120, kernel_scale(kernel), kernel_amplitude(kernel))
    method = resolve(method_name)
    try:
        method.check(model, series)
    except ValueError as exc:
        pytest.skip(f"{method_name} cannot handle this case: {exc}")
    ev = method.evaluate(model, series, gradient=True)
    assert ev.grad.shape == (len(model.free_names),)
    numeric = central_difference(
        lambda x: method.evaluate(model.with_coordinates(x), series).value,
        model.coordinates(),
    )
    np.testing.assert_allclose(ev.grad, numeric, rtol=1e-6, atol=1e-6 * np.abs(numeric).max())
    # the public front end returns the same gradient
    value, grad = log_marginal_likelihood(model, series, method=method, gradient=True)
    assert value == ev.value
    np.testing.assert_array_equal(grad, ev.grad)


def test_fixed_parameters_are_excluded():
    # source: DEVELOPERS.md (gradients are over model.free_names, in that order)
    kernel = Matern32(amplitude=Param(1.0, fixed=True), scale=3.0)
    model = Model(kernel, mean=Param(0.0, fixed=True, positive=False), excess_noise=0.1)
    assert model.free_names == ["matern32.scale", "excess_noise"]
    assert model.coordinates().shape == (2,)


@pytest.mark.parametrize("prior, positive", [
    (LogNormal(median=2.0, width=0.5), True),
    (Normal(loc=-1.0, scale=3.0), False),
])
def test_prior_gradient_equals_central_differences(prior, positive):
    # source: central finite differences of Model.log_prior (common practice)
    model = Model(Matern32(amplitude=Param(1.5, prior=prior if positive else None), scale=2.0),
                  mean=Param(0.4, prior=None if positive else prior, positive=False))
    _, grad = model.log_prior()
    numeric = central_difference(lambda x: model.with_coordinates(x).log_prior()[0],
                                 model.coordinates())
    np.testing.assert_allclose(grad, numeric, rtol=1e-8, atol=1e-10)
