"""Stochastically driven damped harmonic oscillator (exact two-state SDE).

The process solves ``f'' + (w0 / Q) f' + w0^2 f = w(t)``, ``w`` white noise of
spectral density ``q``, with natural angular frequency ``w0`` (rad per time
unit; the undamped period is ``2 pi / w0``) and quality factor ``Q``. With the
state ``x = (f, f')`` the model is linear (Särkkä 2013, ch. 2)::

    F = [[0, 1], [-w0^2, -2 g]],   L = (0, 1)^T,   g = w0 / (2 Q),

and ``F P + P F^T + L q L^T = 0`` is solved by ``Pinf = diag(s2, w0^2 s2)``
with ``q = 4 g w0^2 s2``, ``s2 = amplitude^2`` the variance of ``f`` (check:
the (0,1) entry gives ``P11 = w0^2 P00``, the (1,1) entry ``4 g P11 = q``).

Transition. ``N = F + g I`` satisfies ``N^2 = (g^2 - w0^2) I =: D I`` (Cayley-
Hamilton: ``tr N = 0``, ``det N = w0^2 - g^2``), so with ``e = exp(-g dt)``
the exponential series splits into even and odd powers::

    A(dt) = e * [ ch(dt) I + sh(dt) N ],
    under-damped (Q > 1/2, D = -h^2 < 0): ch = cos(h dt), sh = sin(h dt) / h
    critically damped (Q = 1/2, D = 0):    ch = 1,        sh = dt
    over-damped (Q < 1/2, D = k^2 > 0):    ch = cosh(k dt), sh = sinh(k dt) / k,

and ``k(tau) = H A(tau) Pinf H^T = s2 e^{-g tau} (ch + g sh)``, the classical
covariance of a harmonically bound Brownian particle (Wang & Uhlenbeck 1945,
Rev. Mod. Phys. 17, 323). The over-damped case is written as two real
exponentials, rates ``g -+ k`` and coefficients ``(I +- N / k) / 2``.

Near critical damping (``|D| / g^2 = |1 - 4 Q^2| < NEAR_CRITICAL``) the split
forms lose digits (their derivatives divide by ``h^2`` or ``k^2``), so the
series ``ch = sum_m D^m dt^(2m) / (2m)!``, ``sh = sum_m D^m dt^(2m+1) / (2m+1)!``
is used, truncated after ``m = SERIES_TERMS - 1``. Its error, maximised over
``dt`` with the damping factor, is about ``(|D| / g^2)^SERIES_TERMS`` relative,
below 1e-16 here. All three forms fit the closed transition family of
``kernels/statespace.py`` with exact derivatives.
"""

from __future__ import annotations

import math

import numpy as np

from .base import Primitive
from .statespace import StateSpace

#: Band ``|1 - 4 Q^2|`` inside which the power series form of ``A`` is used.
NEAR_CRITICAL = 1e-4
#: Terms of that series: truncation error about ``NEAR_CRITICAL ** SERIES_TERMS``.
SERIES_TERMS = 4


def _regime(quality: float) -> str:
    """``"series"`` near critical damping, else ``"under"`` or ``"over"``."""
    ratio = 1.0 - 4.0 * quality * quality  # D / g^2
    if abs(ratio) < NEAR_CRITICAL:
        return "series"
    return "under" if ratio < 0 else "over"


class Oscillator(Primitive):
    """Damped, white-noise-driven harmonic oscillator kernel.

    ``k(tau) = amplitude^2 exp(-g tau) (ch(tau) + g sh(tau))`` with
    ``g = frequency / (2 quality)``; ``ch``, ``sh`` as in the module docstring
    (trigonometric for ``quality > 1/2``, hyperbolic below, linear at 1/2).

    Parameters
    ----------
    amplitude : float or Param
        Standard deviation of the process ``f``.
    frequency : float or Param
        Natural (undamped) angular frequency ``w0``, radians per time unit;
        ``2 pi / frequency`` is the undamped period. The covariance of an
        under-damped oscillator oscillates at ``w0 sqrt(1 - 1 / (4 Q^2))``.
    quality : float or Param
        Quality factor ``Q = w0 / (2 g)``, ``g`` the amplitude damping rate:
        ``Q > 1/2`` under-damped (the covariance oscillates), ``Q = 1/2``
        critically damped (Matérn-3/2 with ``scale = sqrt(3) / w0``),
        ``Q < 1/2`` over-damped (a sum of two decaying exponentials).
    label : str, optional
        Prefix of the hyperparameter names in a model, default ``"oscillator"``.

    Examples
    --------
    >>> k = Oscillator(amplitude=1.0, frequency=2.0, quality=0.5)  # critical
    >>> round(float(k.value(1.0)), 6)  # 3 exp(-2), the critical (1 + w0 tau) e^{-w0 tau}
    0.406006
    """

    param_names_local = ("amplitude", "frequency", "quality")
    default_label = "oscillator"
    has_state_space_form = True

    @property
    def period(self) -> float:
        """Undamped period ``2 pi / frequency``."""
        return 2 * math.pi / self._params[1].value

    def _value(self, tau, amplitude, frequency, quality):
        g = frequency / (2 * quality)
        disc = g * g - frequency * frequency
        tau = np.abs(tau)
        if disc < 0:
            h = math.sqrt(-disc)
            ch, sh = np.cos(h * tau), tau * np.sinc(h * tau / math.pi)
        elif disc > 0:
            k = math.sqrt(disc)
            # cosh and sinh/k written with decaying exponentials only (no overflow)
            ep, em = np.exp(-(g - k) * tau), np.exp(-(g + k) * tau)
            return amplitude**2 * (0.5 * (ep + em) + g * (ep - em) / (2 * k))
        else:
            ch, sh = np.ones_like(tau), tau
        return amplitude**2 * np.exp(-g * tau) * (ch + g * sh)

    def _grad(self, tau, amplitude, frequency, quality):
        # Derivatives through the (exactly differentiated) state-space form:
        # k = H A(tau) Pinf H^T, so dk = H (dA Pinf + A dPinf) H^T.
        ss = self._state_space(amplitude, frequency, quality)
        tau = np.abs(np.asarray(tau, dtype=float))
        a0 = ss.transition(tau)[..., 0, :]  # H A, shape tau.shape + (2,)
        da0 = ss.transition_grad(tau)[..., 0, :]
        return da0 @ ss.Pinf[:, 0] + np.einsum("...a,pa->p...", a0, ss.dPinf[:, :, 0])

    def _state_space(self, amplitude, frequency, quality):
        w0, var = frequency, amplitude**2
        g = w0 / (2 * quality)
        disc = g * g - w0 * w0
        eye = np.eye(2)
        n = np.array([[g, 1.0], [-w0 * w0, -g]])
        # derivatives w.r.t. (log amplitude, log frequency, log quality)
        dg = np.array([0.0, g, -g])
        ddisc = np.array([0.0, 2 * disc, -2 * g * g])
        dn = np.stack([np.zeros((2, 2)), [[g, 0.0], [-2 * w0 * w0, -g]], [[-g, 0.0], [0.0, g]]])
        regime = _regime(quality)
        if regime == "under":
            h = math.sqrt(-disc)
            dh = -ddisc / (2 * h)
            rate, freq = np.array([g]), np.array([h])
            cos_coef = eye[None, None].copy()
            sin_coef = (n / h)[None, None]
            d_rate, d_freq = dg[:, None], dh[:, None]
            d_cos = np.zeros((3, 1, 1, 2, 2))
            d_sin = (dn / h - n[None] * (dh / h**2)[:, None, None])[:, None, None]
        elif regime == "over":
            k = math.sqrt(disc)
            dk = ddisc / (2 * k)
            rate, freq = np.array([g - k, g + k]), np.zeros(2)
            d_nk = dn / k - n[None] * (dk / k**2)[:, None, None]  # d(N / k)
            cos_coef = np.stack([0.5 * (eye + n / k), 0.5 * (eye - n / k)])[:, None]
            sin_coef = np.zeros_like(cos_coef)
            d_rate = np.stack([dg - dk, dg + dk], axis=1)
            d_freq = np.zeros((3, 2))
            d_cos = np.stack([0.5 * d_nk, -0.5 * d_nk], axis=1)[:, :, None]
            d_sin = np.zeros_like(d_cos)
        else:
            m = SERIES_TERMS
            rate, freq = np.array([g]), np.zeros(1)
            cos_coef = np.zeros((1, 2 * m, 2, 2))
            d_cos = np.zeros((3, 1, 2 * m, 2, 2))
            for i in range(m):
                even, odd = math.factorial(2 * i), math.factorial(2 * i + 1)
                dpow = i * disc ** (i - 1) if i else 0.0  # d(D^i)/dD
                cos_coef[0, 2 * i] = disc**i / even * eye
                cos_coef[0, 2 * i + 1] = disc**i / odd * n
                d_cos[:, 0, 2 * i] = (dpow * ddisc / even)[:, None, None] * eye
                d_cos[:, 0, 2 * i + 1] = (
                    (dpow * ddisc / odd)[:, None, None] * n + disc**i / odd * dn
                )
            sin_coef = np.zeros_like(cos_coef)
            d_sin = np.zeros_like(d_cos)
            d_rate, d_freq = dg[:, None], np.zeros((3, 1))
        pinf = var * np.diag([1.0, w0 * w0])
        dpinf = np.stack([2 * pinf, var * np.diag([0.0, 2 * w0 * w0]), np.zeros((2, 2))])
        return StateSpace(
            F=np.array([[0.0, 1.0], [-w0 * w0, -2 * g]]),
            L=np.array([[0.0], [1.0]]),
            Qc=np.array([[4 * g * w0 * w0 * var]]),
            H=np.array([1.0, 0.0]),
            Pinf=pinf,
            dPinf=dpinf,
            rate=rate,
            freq=freq,
            cos_coef=np.ascontiguousarray(cos_coef),
            sin_coef=np.ascontiguousarray(sin_coef),
            d_rate=np.ascontiguousarray(d_rate),
            d_freq=np.ascontiguousarray(d_freq),
            d_cos_coef=np.ascontiguousarray(d_cos),
            d_sin_coef=np.ascontiguousarray(d_sin),
        )
