"""Draws from GP priors: for tests, demos and benchmarks.

With a state-space form the draw is exact and costs O(n) (the discrete model
of Hartikainen & Särkkä 2010); otherwise it uses a dense Cholesky factor.
"""

from __future__ import annotations

import numpy as np

from ._loops.sample import sample_states
from .kernels.base import Kernel
from .model import Model
from .series import Series


def sample_prior(kernel: Kernel, t, *, rng=None, dense_max_n: int = 10_000) -> np.ndarray:
    """One draw of ``f(t)`` from the zero-mean GP prior with covariance ``kernel``.

    Parameters
    ----------
    kernel : Kernel
    t : array_like of shape (n,)
        Times, sorted ascending (duplicates allowed).
    rng : numpy.random.Generator or int, optional
        Generator or seed (default: seed 0, so repeated calls agree).
    dense_max_n : int, default 10000
        Largest n drawn densely when the kernel has no state-space form.

    Returns
    -------
    ndarray of shape (n,)

    Examples
    --------
    >>> from longwave.kernels import Matern32
    >>> f = sample_prior(Matern32(amplitude=2.0, scale=5.0), [0.0, 1.0, 2.0], rng=3)
    >>> f.shape
    (3,)
    """
    t = np.asarray(t, dtype=float)
    if t.ndim != 1 or t.size == 0:
        raise ValueError(f"t must be a non-empty 1-D array, got shape {t.shape}")
    if np.any(np.diff(t) < 0):
        i = int(np.flatnonzero(np.diff(t) < 0)[0]) + 1
        raise ValueError(f"t must be sorted ascending; t[{i}] = {t[i]} < t[{i - 1}] = {t[i - 1]}")
    rng = np.random.default_rng(0 if rng is None else rng)
    if kernel.has_state_space:
        ss = kernel.state_space()
        out = np.empty(t.size)
        z = rng.standard_normal((t.size, ss.dim))
        sample_states(t, ss.H, ss.Pinf, (ss.rate, ss.freq, ss.cos_coef, ss.sin_coef), z, out)
        return out
    if t.size > dense_max_n:
        raise ValueError(
            f"kernel {kernel!r} has no state-space form and n={t.size} exceeds "
            f"dense_max_n={dense_max_n}; raise dense_max_n if you have the memory"
        )
    K = kernel(t)
    w, v = np.linalg.eigh(K)
    return v @ (np.sqrt(np.clip(w, 0, None)) * rng.standard_normal(t.size))


def simulate_series(model: Model, t, err=None, *, rng=None) -> tuple[Series, np.ndarray]:
    """Simulate observations ``y = mean + f(t) + noise`` from a model.

    Parameters
    ----------
    model : Model
    t : array_like of shape (n,)
        Sorted times.
    err : float or array_like of shape (n,), optional
        Measurement errors (the noise also includes the model's excess noise).
    rng : numpy.random.Generator or int, optional

    Returns
    -------
    series : Series
    latent : ndarray of shape (n,)
        The noiseless values ``mean + f(t)``.
    """
    rng = np.random.default_rng(0 if rng is None else rng)
    t = np.asarray(t, dtype=float)
    latent = model.mean_value + sample_prior(model.kernel, t, rng=rng)
    e = np.zeros(t.size) if err is None else np.broadcast_to(np.asarray(err, float), t.shape)
    noise_sd = np.sqrt(model.noise_variance(e))
    y = latent + noise_sd * rng.standard_normal(t.size)
    return Series(t, y, None if err is None else e), latent
