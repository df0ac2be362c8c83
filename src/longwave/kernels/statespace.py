"""State-space form of a stationary kernel, and the closed-form transition.

A kernel with a state-space form is the covariance of ``f(t) = H x(t)``
where ``dx/dt = F x + L w(t)`` and ``w`` is white noise of spectral density
``Qc`` (Hartikainen & Särkkä 2010, "Kalman filtering and smoothing solutions
to temporal Gaussian process regression models"). The stationary state
covariance ``Pinf`` solves ``F P + P F^T + L Qc L^T = 0`` and the discrete
model between two times ``dt`` apart is

    x(t + dt) = A(dt) x(t) + q,   A(dt) = expm(F dt),
    q ~ N(0, Q(dt)),              Q(dt) = Pinf - A(dt) Pinf A(dt)^T.

Every kernel in longwave writes ``A(dt)`` in one closed form, a sum of
damped, rotated matrix polynomials::

    A(dt) = sum_j exp(-rate_j dt) * ( cos(freq_j dt) * sum_k C[j, k] dt^k
                                    + sin(freq_j dt) * sum_k S[j, k] dt^k )

Matérn kernels need one term with ``freq = 0`` (``F + rate I`` is nilpotent),
oscillators and cosines add the rotation, sums stack blocks on the diagonal.
Because the form is closed under differentiation with respect to each
hyperparameter, the derivative of ``A`` is stored the same way, and the
compiled Kalman loops evaluate ``A`` and ``dA`` at each step from these few
coefficient arrays without knowing which kernel produced them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import block_diag


@dataclass(frozen=True)
class StateSpace:
    """Matrices of a state-space model and the coefficients of ``A(dt)``.

    Attributes
    ----------
    F : ndarray of shape (d, d)
        Feedback matrix.
    L : ndarray of shape (d, q)
        Noise effect matrix.
    Qc : ndarray of shape (q, q)
        Spectral density of the white-noise driver.
    H : ndarray of shape (d,)
        Measurement vector, ``f = H x``.
    Pinf : ndarray of shape (d, d)
        Stationary state covariance.
    dPinf : ndarray of shape (p, d, d)
        Derivatives of ``Pinf`` with respect to the kernel's free coordinates
        (log of each hyperparameter), in the kernel's parameter order.
    rate, freq : ndarray of shape (J,)
        Damping rates and angular frequencies of the terms of ``A``.
    cos_coef, sin_coef : ndarray of shape (J, K, d, d)
        Matrix coefficients of ``dt^k`` in the cosine and sine parts of term j.
    d_rate, d_freq : ndarray of shape (p, J)
        Their derivatives with respect to the free coordinates.
    d_cos_coef, d_sin_coef : ndarray of shape (p, J, K, d, d)
        Derivatives of the coefficient matrices.
    """

    F: np.ndarray
    L: np.ndarray
    Qc: np.ndarray
    H: np.ndarray
    Pinf: np.ndarray
    dPinf: np.ndarray
    rate: np.ndarray
    freq: np.ndarray
    cos_coef: np.ndarray
    sin_coef: np.ndarray
    d_rate: np.ndarray
    d_freq: np.ndarray
    d_cos_coef: np.ndarray
    d_sin_coef: np.ndarray

    @property
    def dim(self) -> int:
        """State dimension d."""
        return self.H.shape[0]

    @property
    def n_params(self) -> int:
        return self.dPinf.shape[0]

    def transition(self, dt) -> np.ndarray:
        """``A(dt)`` for an array of non-negative steps, shape ``dt.shape + (d, d)``."""
        dt = np.asarray(dt, dtype=float)
        return self._combine(dt, self.cos_coef, self.sin_coef)

    def transition_grad(self, dt) -> np.ndarray:
        """Derivatives of ``A(dt)``, shape ``(p,) + dt.shape + (d, d)``.

        Differentiating each term by the product rule: the damping factor
        contributes ``-d_rate * dt``, the rotation ``d_freq * dt`` times the
        swapped trigonometric part, the coefficients their own derivatives.
        """
        dt = np.asarray(dt, dtype=float)
        out = np.empty((self.n_params,) + dt.shape + (self.dim, self.dim))
        powers = self._powers(dt)
        decay = np.exp(-np.multiply.outer(dt, self.rate))  # dt.shape + (J,)
        phase = np.multiply.outer(dt, self.freq)
        c, s = np.cos(phase), np.sin(phase)
        pc = np.einsum("...k,jkab->...jab", powers, self.cos_coef)
        ps = np.einsum("...k,jkab->...jab", powers, self.sin_coef)
        for i in range(self.n_params):
            dpc = np.einsum("...k,jkab->...jab", powers, self.d_cos_coef[i])
            dps = np.einsum("...k,jkab->...jab", powers, self.d_sin_coef[i])
            ddecay = (-dt[..., None] * self.d_rate[i]) * decay
            dphase = dt[..., None] * self.d_freq[i]
            term = (
                ddecay[..., None, None] * (c[..., None, None] * pc + s[..., None, None] * ps)
                + decay[..., None, None]
                * (
                    c[..., None, None] * dpc
                    + s[..., None, None] * dps
                    + dphase[..., None, None]
                    * (c[..., None, None] * ps - s[..., None, None] * pc)
                )
            )
            out[i] = term.sum(axis=-3)
        return out

    def process_noise(self, dt) -> np.ndarray:
        """``Q(dt) = Pinf - A Pinf A^T``, shape ``dt.shape + (d, d)``."""
        a = self.transition(dt)
        return self.Pinf - a @ self.Pinf @ np.swapaxes(a, -1, -2)

    def process_noise_grad(self, dt) -> np.ndarray:
        """Derivatives of ``Q(dt)``, shape ``(p,) + dt.shape + (d, d)``."""
        a = self.transition(dt)
        da = self.transition_grad(dt)
        at = np.swapaxes(a, -1, -2)
        out = np.empty_like(da)
        for i in range(self.n_params):
            apd = da[i] @ self.Pinf @ at
            out[i] = self.dPinf[i] - apd - np.swapaxes(apd, -1, -2) - a @ self.dPinf[i] @ at
        return out

    def _powers(self, dt):
        return _powers(dt, self.cos_coef.shape[1])

    def _combine(self, dt, cos_coef, sin_coef):
        return closed_transition(self.rate, self.freq, cos_coef, sin_coef, dt)


def closed_transition(rate, freq, cos_coef, sin_coef, dt) -> np.ndarray:
    """The closed form of the module docstring at steps ``dt``: shape ``dt.shape + (d, d)``.

    Takes the coefficient arrays themselves (of :class:`StateSpace`, or the
    same in another basis), so callers holding only those can evaluate ``A``.
    """
    dt = np.asarray(dt, dtype=float)
    powers = _powers(dt, cos_coef.shape[1])
    decay = np.exp(-np.multiply.outer(dt, rate))
    phase = np.multiply.outer(dt, freq)
    pc = np.einsum("...k,jkab->...jab", powers, cos_coef)
    ps = np.einsum("...k,jkab->...jab", powers, sin_coef)
    terms = decay[..., None, None] * (
        np.cos(phase)[..., None, None] * pc + np.sin(phase)[..., None, None] * ps
    )
    return terms.sum(axis=-3)


def _powers(dt, k):
    """``dt^0 .. dt^(k-1)`` along a new last axis."""
    return dt[..., None] ** np.arange(k)


def stack_blocks(parts: list[StateSpace]) -> StateSpace:
    """State-space form of a sum of independent processes: blocks on the diagonal.

    The parameters of the result are those of the parts, concatenated in order;
    each part's derivatives are zero outside its own block.
    """
    dims = [p.dim for p in parts]
    d = sum(dims)
    n_terms = sum(p.rate.size for p in parts)
    k_max = max(p.cos_coef.shape[1] for p in parts)
    n_par = sum(p.n_params for p in parts)
    cos_coef = np.zeros((n_terms, k_max, d, d))
    sin_coef = np.zeros_like(cos_coef)
    d_cos = np.zeros((n_par, n_terms, k_max, d, d))
    d_sin = np.zeros_like(d_cos)
    d_rate = np.zeros((n_par, n_terms))
    d_freq = np.zeros_like(d_rate)
    dpinf = np.zeros((n_par, d, d))
    off, joff, poff = 0, 0, 0
    for p in parts:
        sl = slice(off, off + p.dim)
        jl = slice(joff, joff + p.rate.size)
        pl = slice(poff, poff + p.n_params)
        k = p.cos_coef.shape[1]
        cos_coef[jl, :k, sl, sl] = p.cos_coef
        sin_coef[jl, :k, sl, sl] = p.sin_coef
        d_cos[pl, jl, :k, sl, sl] = p.d_cos_coef
        d_sin[pl, jl, :k, sl, sl] = p.d_sin_coef
        d_rate[pl, jl] = p.d_rate
        d_freq[pl, jl] = p.d_freq
        dpinf[pl, sl, sl] = p.dPinf
        off, joff, poff = off + p.dim, joff + p.rate.size, poff + p.n_params
    return StateSpace(
        F=block_diag(*[p.F for p in parts]),
        L=block_diag(*[p.L for p in parts]),
        Qc=block_diag(*[p.Qc for p in parts]),
        H=np.concatenate([p.H for p in parts]),
        Pinf=block_diag(*[p.Pinf for p in parts]),
        dPinf=dpinf,
        rate=np.concatenate([p.rate for p in parts]),
        freq=np.concatenate([p.freq for p in parts]),
        cos_coef=cos_coef,
        sin_coef=sin_coef,
        d_rate=d_rate,
        d_freq=d_freq,
        d_cos_coef=d_cos,
        d_sin_coef=d_sin,
    )
