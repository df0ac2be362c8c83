"""Support windows and raw (unwhitened) accumulation of the sparse passes.

Sources:
- Matérn covariances, Rasmussen & Williams 2006, eq. 4.17, and the squared
  exponential, eq. 4.9, written out here in numpy (not the kernels' code);
- the windowed passes against the same method with ``windows=False``, which
  evaluates every block in full and whitens each one (the formulas of
  Titsias 2009 and Snelson & Ghahramani 2006, already checked against Exact
  and dense Q_ff in test_sparse.py): they must agree to round-off;
- central finite differences (common practice) for the raw gradients.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import central_difference

from longwave import Model, Series
from longwave.kernels import Matern12, Matern32, Matern52, Periodic, SquaredExp
from longwave.kernels.base import SUPPORT_REL, decay_root
from longwave.methods import FITC, VFE
from longwave.methods.sparse import RAW_COND_MAX, kuu_condition
from longwave.methods.sparse_windows import Windows, size


def _matern_ref(order, amp, scale, tau):
    """Value and d/dlog(scale) of Matérn-(order - 1/2) from eq. 4.17 (R&W 2006)."""
    nu = order - 0.5
    u = math.sqrt(2 * nu) * tau / scale
    poly = {1: 1 + 0 * u, 2: 1 + u, 3: 1 + u + u * u / 3}[order]
    value = amp**2 * poly * np.exp(-u)
    # d/dlog(scale) = -u d/du
    dpoly = {1: 0 * u, 2: 1 + 0 * u, 3: 1 + 2 * u / 3}[order]
    dscale = -u * amp**2 * (dpoly - poly) * np.exp(-u)
    return value, dscale


@pytest.mark.parametrize("order, cls", [(1, Matern12), (2, Matern32), (3, Matern52)])
def test_matern_support_radius_bounds_value_and_derivatives(order, cls):
    kernel = cls(amplitude=1.7, scale=4.0)
    radius = kernel.support_radius()
    tau = radius * np.linspace(1.0, 5.0, 2001)
    value, dscale = _matern_ref(order, 1.7, 4.0, tau)
    assert np.abs(value).max() <= SUPPORT_REL * 1.7**2
    assert np.abs(dscale).max() <= SUPPORT_REL * 1.7**2
    # and not absurdly far out: at a third of the radius the value is still large
    assert _matern_ref(order, 1.7, 4.0, np.array([radius / 3]))[0][0] > 1e3 * SUPPORT_REL


def test_squared_exp_support_radius_bounds_value_and_derivatives():
    kernel = SquaredExp(amplitude=0.5, scale=2.5)
    radius = kernel.support_radius()
    x = radius * np.linspace(1.0, 4.0, 2001) / 2.5
    value = 0.25 * np.exp(-0.5 * x * x)  # R&W 2006, eq. 4.9
    dscale = 0.25 * x * x * np.exp(-0.5 * x * x)
    assert max(value.max(), dscale.max()) <= SUPPORT_REL * 0.25
    assert 0.25 * np.exp(-0.5 * (radius / 2.5 / 2) ** 2) > 1e3 * SUPPORT_REL * 0.25


def test_composite_radii_and_non_decaying_kernels():
    short, long_ = Matern32(amplitude=1.0, scale=1.0), Matern12(amplitude=1.0, scale=10.0)
    assert (short + long_).support_radius() == long_.support_radius()
    assert (short * long_).support_radius() == short.support_radius()
    periodic = Periodic(amplitude=1.0, period=3.0, scale=1.0)
    assert periodic.support_radius() == math.inf
    assert (periodic * short).support_radius() == short.support_radius()
    assert (periodic + short).support_radius() == math.inf


@pytest.mark.parametrize("power, factor", [(3.0, 1.0), (1.0, 2.0), (0.0, 1.0)])
def test_decay_root_solves_its_equation(power, factor):
    x = decay_root(1e-17, power, factor)
    lhs = (1 + factor * x) ** power * math.exp(-x)
    assert lhs == pytest.approx(1e-17, rel=1e-10)
    assert x > power  # on the decreasing side


def test_windows_hold_exactly_the_inducing_times_in_reach():
    rng = np.random.default_rng(7)
    z = rng.uniform(0, 1000, 300)  # unsorted on purpose
    windows = Windows.build(z, radius=25.0)
    for _ in range(50):
        lo = rng.uniform(-100, 1100)
        t = rng.uniform(lo, lo + rng.uniform(0, 80), 40)
        want = np.flatnonzero((z >= t.min() - 25.0) & (z <= t.max() + 25.0))
        got = np.arange(z.size)[windows.find(t)]
        np.testing.assert_array_equal(np.sort(got), want)
    zs = np.sort(z)
    win = Windows.build(zs, 25.0).find(np.array([500.0]))
    assert isinstance(win, slice)
    assert size(win, zs.size) == np.count_nonzero(np.abs(zs - 500.0) <= 25.0)
    assert Windows.build(z, math.inf).find(np.array([1.0])) == slice(0, 300)


def _long_series(rng, n=6000, span=3000.0):
    t = np.sort(rng.uniform(0, span, n))
    y = np.sin(t / 9.0) + 0.3 * rng.standard_normal(n)
    err = rng.uniform(0.2, 0.4, n)
    return Series(t, y, err)


@pytest.mark.parametrize("cls", [VFE, FITC])
@pytest.mark.parametrize("kernel_id", ["matern32", "matern52+matern12", "squared_exp"])
def test_windowed_raw_passes_equal_full_whitened_ones(cls, kernel_id, rng):
    kernel = {
        "matern32": Matern32(amplitude=1.0, scale=3.0),
        "matern52+matern12": Matern52(amplitude=0.8, scale=3.0)
        + Matern12(amplitude=0.3, scale=2.0),
        "squared_exp": SquaredExp(amplitude=1.0, scale=2.0),
    }[kernel_id]
    model = Model(kernel, mean=0.1, excess_noise=0.05)
    series = _long_series(rng)
    z = rng.permutation(np.linspace(0, 3000, 200))  # unsorted: windows as index arrays
    fast = cls(inducing=z, chunk=500)
    full = cls(inducing=z, chunk=500, windows=False)
    setup = fast._setup(model, z)
    assert setup.raw, "the case must exercise the raw path"
    assert kuu_condition(setup.chol) <= RAW_COND_MAX
    # and windows must be small, or the comparison says nothing about them
    assert size(setup.windows.find(series.t[:500]), z.size) < z.size // 4
    ev_fast, gz_fast = fast.evaluate_inducing(model, series)
    ev_full, gz_full = full.evaluate_inducing(model, series)
    assert ev_fast.value == pytest.approx(ev_full.value, rel=1e-11)
    for key in ("lower_bound", "upper_bound", "trace_term"):
        assert ev_fast.extras[key] == pytest.approx(ev_full.extras[key], rel=1e-10, abs=1e-8)
    np.testing.assert_allclose(ev_fast.grad, ev_full.grad, rtol=1e-9,
                               atol=1e-9 * np.abs(ev_full.grad).max())
    np.testing.assert_allclose(gz_fast, gz_full, rtol=1e-8, atol=1e-9 * np.abs(gz_full).max())


@pytest.mark.parametrize("cls", [VFE, FITC])
def test_raw_gradient_equals_central_differences(cls, rng):
    model = Model(Matern32(amplitude=1.0, scale=3.0), mean=0.1, excess_noise=0.05)
    series = _long_series(rng, n=2000, span=1000.0)
    method = cls(inducing=np.linspace(0, 1000, 120), chunk=300)
    assert method._setup(model, np.asarray(method.inducing)).raw
    ev = method.evaluate(model, series, gradient=True)
    numeric = central_difference(
        lambda x: method.evaluate(model.with_coordinates(x), series).value, model.coordinates())
    np.testing.assert_allclose(ev.grad, numeric, rtol=1e-6, atol=1e-6 * np.abs(numeric).max())


def test_ill_conditioned_inducing_times_whiten_every_block(rng):
    model = Model(Matern52(amplitude=1.0, scale=50.0), excess_noise=0.1)
    z = np.linspace(0, 100, 40)  # 40 times within two length scales
    setup = VFE(inducing=z)._setup(model, z)
    assert kuu_condition(setup.chol) > RAW_COND_MAX
    assert not setup.raw
