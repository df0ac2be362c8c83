"""Matérn kernels of half-integer order 1/2, 3/2 and 5/2.

Dense form (Rasmussen & Williams 2006, eq. 4.17), with ``u = lam * tau`` and
``lam = sqrt(2 nu) / scale``::

    nu = 1/2:  k = amplitude^2 exp(-u)
    nu = 3/2:  k = amplitude^2 (1 + u) exp(-u)
    nu = 5/2:  k = amplitude^2 (1 + u + u^2 / 3) exp(-u)

State-space form (Hartikainen & Särkkä 2010): the state is ``f`` and its
first ``d - 1`` derivatives; ``F`` is the companion matrix of
``(s + lam)^d`` so ``N = F + lam I`` is nilpotent and

    A(dt) = exp(-lam dt) * sum_{k<d} N^k dt^k / k!      (exact).

Scaling the state by ``S = diag(lam^i)`` makes every matrix a fixed pattern
times powers of ``lam``; the derivatives with respect to ``log(scale)``
follow from those powers (``d lam / d log(scale) = -lam``).
"""

from __future__ import annotations

import functools
import math

import numpy as np
from scipy.linalg import solve_continuous_lyapunov

from .._loops.blocks import CODE_MATERN12, CODE_MATERN32, CODE_MATERN52
from .base import SUPPORT_REL, Primitive, decay_root
from .statespace import StateSpace


@functools.cache
def _unit_matrices(d: int):
    """F, N and Pinf at lam = 1, amplitude = 1 for the order with state size d.

    Cached: they are constants of the order, and the Lyapunov solve would
    otherwise cost about 0.1 ms per likelihood evaluation. Returned read-only.
    """
    coeffs = [math.comb(d, k) for k in range(d)]  # (s + 1)^d = s^d + sum c_k s^k
    f = np.zeros((d, d))
    f[np.arange(d - 1), np.arange(1, d)] = 1.0
    f[-1, :] = -np.asarray(coeffs, dtype=float)
    # White-noise density that makes the variance 1: solve with q = 1, rescale.
    lvec = np.zeros((d, 1))
    lvec[-1, 0] = 1.0
    p1 = solve_continuous_lyapunov(f, -lvec @ lvec.T)
    q = 1.0 / p1[0, 0]
    out = (f, f + np.eye(d), p1 * q)
    for arr in out:
        arr.flags.writeable = False
    return (*out, q)


class _Matern(Primitive):
    param_names_local = ("amplitude", "scale")
    has_state_space_form = True
    order: int  # state dimension d = nu + 1/2

    @property
    def rate(self) -> float:
        """``lam = sqrt(2 nu) / scale``, the decay rate of the covariance."""
        nu = self.order - 0.5
        return math.sqrt(2 * nu) / self._params[1].value

    def support_radius(self, rel: float = SUPPORT_REL) -> float:
        # value and both log-derivatives are poly(u) exp(-u) with poly <= (1 + u)^3
        # times k(0) = amplitude^2, for every order up to 5/2
        return decay_root(rel, 3.0) / self.rate

    def _u(self, tau, scale):
        return (math.sqrt(2 * (self.order - 0.5)) / scale) * np.abs(tau)

    def _value(self, tau, amplitude, scale):
        u = self._u(tau, scale)
        return amplitude**2 * self._poly(u) * np.exp(-u)

    def _grad(self, tau, amplitude, scale):
        u = self._u(tau, scale)
        e = np.exp(-u)
        return np.stack(
            [2 * amplitude**2 * self._poly(u) * e, amplitude**2 * self._dscale(u) * e]
        )

    def _state_space(self, amplitude, scale):
        d = self.order
        lam = math.sqrt(2 * (d - 0.5)) / scale
        var = amplitude**2
        f1, n1, p1, q1 = _unit_matrices(d)
        i = np.arange(d)
        s = lam ** i.astype(float)
        expo = i[:, None] + i[None, :]
        pinf = var * p1 * lam**expo
        # C_k[i, j] = lam^(k + i - j) (N1^k)[i, j] / k!
        cos_coef = np.empty((1, d, d, d))
        d_cos = np.zeros((2, 1, d, d, d))
        nk = np.eye(d)
        for k in range(d):
            power = k + i[:, None] - i[None, :]
            ck = nk * lam**power / math.factorial(k)
            cos_coef[0, k] = ck
            d_cos[1, 0, k] = -power * ck
            nk = nk @ n1
        dpinf = np.stack([2 * pinf, -expo * pinf])
        lvec = np.zeros((d, 1))
        lvec[-1, 0] = 1.0
        return StateSpace(
            F=lam * (f1 * s[:, None] / s[None, :]),
            L=lvec,
            Qc=np.array([[var * q1 * lam ** (2 * d - 1)]]),
            H=np.eye(d)[0],
            Pinf=pinf,
            dPinf=dpinf,
            rate=np.array([lam]),
            freq=np.zeros(1),
            cos_coef=cos_coef,
            sin_coef=np.zeros_like(cos_coef),
            d_rate=np.array([[0.0], [-lam]]),
            d_freq=np.zeros((2, 1)),
            d_cos_coef=d_cos,
            d_sin_coef=np.zeros_like(d_cos),
        )


class Matern12(_Matern):
    """Matérn-1/2 (exponential, Ornstein-Uhlenbeck) kernel.

    ``k(tau) = amplitude^2 exp(-tau / scale)`` (Rasmussen & Williams 2006, eq. 4.17).

    Parameters
    ----------
    amplitude : float or Param
        Standard deviation of the process.
    scale : float or Param
        Length scale (time units).
    label : str, optional
        Prefix of the hyperparameter names in a model, default ``"matern12"``.

    Examples
    --------
    >>> k = Matern12(amplitude=2.0, scale=5.0)
    >>> float(k.value(0.0))
    4.0
    """

    order = 1
    default_label = "matern12"
    loop_code = CODE_MATERN12  # compiled form in _loops/blocks.py (sparse methods)

    @staticmethod
    def _poly(u):
        return np.ones_like(u)

    @staticmethod
    def _dscale(u):
        # d/dlog(scale) of poly(u) exp(-u), divided by exp(-u), with du/dlog(scale) = -u
        return u


class Matern32(_Matern):
    """Matérn-3/2 kernel, once mean-square differentiable.

    ``k(tau) = amplitude^2 (1 + u) exp(-u)``, ``u = sqrt(3) tau / scale``
    (Rasmussen & Williams 2006, eq. 4.17). Parameters as :class:`Matern12`.

    Examples
    --------
    >>> k = Matern32(amplitude=1.0, scale=2.0)
    >>> round(float(k.value(2.0)), 6)
    0.483358
    """

    order = 2
    default_label = "matern32"
    loop_code = CODE_MATERN32  # compiled form in _loops/blocks.py (sparse methods)

    @staticmethod
    def _poly(u):
        return 1 + u

    @staticmethod
    def _dscale(u):
        return u * u


class Matern52(_Matern):
    """Matérn-5/2 kernel, twice mean-square differentiable.

    ``k(tau) = amplitude^2 (1 + u + u^2 / 3) exp(-u)``, ``u = sqrt(5) tau / scale``
    (Rasmussen & Williams 2006, eq. 4.17). Parameters as :class:`Matern12`.
    """

    order = 3
    default_label = "matern52"
    loop_code = CODE_MATERN52  # compiled form in _loops/blocks.py (sparse methods)

    @staticmethod
    def _poly(u):
        return 1 + u + u * u / 3

    @staticmethod
    def _dscale(u):
        return u * u * (1 + u) / 3
