"""Compiled sampling of a state-space process at irregular times."""

from __future__ import annotations

import numpy as np
from numba import njit

from .kalman import transition


@njit(cache=True)
def _psd_sqrt(Q, out):
    """Symmetric square root of a PSD matrix, tolerating round-off negatives."""
    w, v = np.linalg.eigh(Q)
    d = Q.shape[0]
    for a in range(d):
        for b in range(d):
            acc = 0.0
            for c in range(d):
                acc += v[a, c] * np.sqrt(max(w[c], 0.0)) * v[b, c]
            out[a, b] = acc


@njit(cache=True)
def sample_states(t, H, Pinf, trans, z, out):
    """Draw ``f(t) = H x(t)`` for a stationary state-space prior.

    ``z`` (n, d) are standard normal draws; ``out`` (n,) receives the sample.
    ``x(t0) ~ N(0, Pinf)``, then ``x_k = A x_{k-1} + Q^(1/2) z_k``.
    """
    rate, freq, cos_coef, sin_coef = trans
    n = t.size
    d = H.size
    A = np.zeros((d, d))
    root = np.zeros((d, d))
    x = np.zeros(d)
    _psd_sqrt(Pinf, root)
    x[:] = root @ z[0]
    out[0] = H @ x
    for i in range(1, n):
        dt = t[i] - t[i - 1]
        if dt > 0.0:
            transition(dt, rate, freq, cos_coef, sin_coef, A)
            Q = Pinf - A @ Pinf @ A.T
            _psd_sqrt(0.5 * (Q + Q.T), root)
            x = A @ x + root @ z[i]
        out[i] = H @ x
