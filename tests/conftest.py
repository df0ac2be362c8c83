"""Shared fixtures of the core-engine tests: seeded generators, kernels, test series.

Every random draw in the suite comes from a generator seeded here or in the
test itself, so a failure reproduces exactly. The series factory builds the
awkward data the issue asks every method to survive: irregular steps,
heteroscedastic error bars, repeated times, gaps of many length scales and a
large time offset (2.46e6, a Julian-date-like origin).
"""

# ruff: noqa: I001  (longwave must be imported before numpy, see below)
from __future__ import annotations

import zlib

# longwave first: it sets the passive thread-waiting variables (see
# longwave/_config.py), which only act if set before numpy loads OpenBLAS.
import longwave  # noqa: F401
import numpy as np
import pytest

from longwave import Model, Series
from longwave.kernels import Matern12, Matern32, Matern52, Primitive

# Kernels with a state-space form, by id: the three Matérn orders and a sum.
# Scales are in units of the mean time step of the series factory (1.0).
KERNEL_CASES = {
    "matern12": lambda: Matern12(amplitude=1.3, scale=7.0),
    "matern32": lambda: Matern32(amplitude=0.8, scale=5.0),
    "matern52": lambda: Matern52(amplitude=1.1, scale=9.0),
    "matern32+matern12": lambda: Matern32(amplitude=1.0, scale=12.0)
    + Matern12(amplitude=0.4, scale=2.0),
}


class NoStateSpace(Primitive):
    """A kernel without a state-space form, written the way DEVELOPERS.md says to add one.

    ``k(tau) = amplitude^2 / (1 + (tau / scale)^2)``: positive definite, being the
    Fourier transform of ``exp(-scale |w|)`` (Bochner's theorem, R&W 2006, Theorem 4.1).
    It sends code down the dense paths (Exact, dense prior draws).
    """

    param_names_local = ("amplitude", "scale")
    default_label = "nostatespace"

    def _value(self, tau, amplitude, scale):
        return amplitude**2 / (1 + (tau / scale) ** 2)

    def _grad(self, tau, amplitude, scale):
        r2 = (tau / scale) ** 2
        return np.stack([2 * amplitude**2 / (1 + r2), 2 * amplitude**2 * r2 / (1 + r2) ** 2])


def make_kernel(case: str):
    """A fresh kernel for one of ``KERNEL_CASES``."""
    return KERNEL_CASES[case]()


def kernel_scale(kernel) -> float:
    """The longest length scale of a (sum of) Matérn kernel(s)."""
    return max(leaf.params()[1].value for leaf in kernel.leaves())


def kernel_amplitude(kernel) -> float:
    """Prior standard deviation ``sqrt(k(0))``."""
    return float(np.sqrt(kernel.variance()))


def make_times(rng, n, *, step=1.0, offset=0.0, n_duplicates=0, n_gaps=0, gap=0.0):
    """Sorted irregular times: exponential steps of mean ``step``.

    ``n_duplicates`` steps are set to zero (repeated times) and ``n_gaps``
    steps to ``gap``; ``offset`` is added to every time.
    """
    dt = rng.exponential(step, n - 1)
    chosen = rng.choice(n - 1, size=n_duplicates + n_gaps, replace=False)
    dt[chosen[:n_duplicates]] = 0.0
    dt[chosen[n_duplicates:]] = gap
    return offset + np.concatenate([[0.0], np.cumsum(dt)])


def make_series(rng, n, *, amplitude=1.0, err_range=(0.05, 0.5), **time_options):
    """A series with times from :func:`make_times`, smooth-ish values, heteroscedastic errors.

    The values are a random walk plus noise, so they are neither a prior draw
    nor white: the methods must agree on any data, not only typical data.
    """
    t = make_times(rng, n, **time_options)
    err = amplitude * rng.uniform(*err_range, n)
    walk = np.cumsum(rng.standard_normal(n)) / np.sqrt(n)
    y = amplitude * (walk + 0.3 * rng.standard_normal(n)) + 0.2
    return Series(t, y, err)


def hard_series(rng, n, scale, amplitude):
    """The issue's hard case: repeated times, gaps of 1000 length scales, offset 2.46e6."""
    return make_series(
        rng, n, amplitude=amplitude, step=1.0, offset=2.46e6,
        n_duplicates=max(n // 50, 2), n_gaps=3, gap=1000.0 * scale,
    )


def central_difference(func, x, step=1e-5):
    """Central finite-difference derivatives of ``func`` at ``x`` (error O(step^2)).

    ``func`` may return a scalar or an array; the result has shape
    ``(x.size,) + shape of func(x)``.
    """
    x = np.asarray(x, dtype=float)
    out = []
    for i in range(x.size):
        up, down = x.copy(), x.copy()
        up[i] += step
        down[i] -= step
        out.append((np.asarray(func(up)) - np.asarray(func(down))) / (2 * step))
    return np.array(out)


def seed_for(name: str) -> int:
    """A stable seed from a string (the same on every machine and run)."""
    return zlib.crc32(name.encode())


@pytest.fixture
def rng(request):
    """A generator seeded from the test's id: independent per test, reproducible."""
    return np.random.default_rng(seed_for(request.node.nodeid))


@pytest.fixture(params=sorted(KERNEL_CASES))
def kernel_case(request):
    """Id of each state-space kernel case, for tests that run over all of them."""
    return request.param


@pytest.fixture
def kernel(kernel_case):
    return make_kernel(kernel_case)


@pytest.fixture
def model_with_everything(kernel):
    """The kernel with a free mean and a free excess noise."""
    return Model(kernel, mean=0.2, excess_noise=0.15)
