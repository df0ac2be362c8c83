"""Periodic kernel and its Fourier-series state-space approximation.

Dense form (MacKay 1998, "Introduction to Gaussian processes", eq. 47)::

    k(tau) = amplitude^2 exp(-2 sin^2(pi tau / period) / scale^2).

Since ``2 sin^2(x) = 1 - cos(2x)``, ``k = amplitude^2 e^{-z} exp(z cos(w tau))``
with ``z = scale^-2`` and ``w = 2 pi / period``, and the generating function of
the modified Bessel functions, ``exp(z cos u) = I_0(z) + 2 sum_j I_j(z) cos(j u)``
(Abramowitz & Stegun 1964, eq. 9.6.34), gives the Fourier series

    k(tau) = amplitude^2 sum_{j>=0} q_j^2 cos(j w tau),
    q_0^2 = I_0(z) / e^z,   q_j^2 = 2 I_j(z) / e^z  (j >= 1)

(Solin & Särkkä 2014, "Explicit link between periodic covariance functions
and state space models", eq. 13). Truncated after ``j = order`` it is a sum
of ``order`` noise-free rotations (``Cosine`` blocks at frequencies ``j w``)
plus a random constant: state dimension ``2 order + 1``, rate 0 everywhere,
``Q(dt) = Pinf - A Pinf A^T = 0`` exactly (a pure rotation keeps ``Pinf``).

Error. Every ``q_j^2`` is positive and ``|cos| <= 1``, so the truncation error
``sum_{j > order} q_j^2 cos(j w tau)`` is largest at ``tau = 0`` and equals
``amplitude^2 sum_{j > order} q_j^2``: :meth:`Periodic.covariance_error_bound`
returns this maximum exactly (summed directly, not as ``1 - head``, to keep
its digits).

Automatic order. With ``order=None`` the order ``J`` is the smallest whose
tail ``e(J) = sum_{j > J} q_j^2`` is at most ``tolerance``, chosen
afresh at each call from the current ``scale``. So that the covariance does
not jump when ``J`` steps during a fit (a jump of ``1e-3`` of the variance
moves a long series' likelihood by whole units and stalls line searches),
harmonic ``J`` keeps only the weight ``e(J - 1) - tolerance``: the
error is then exactly ``tolerance`` times the variance, and the weight
of a newly added harmonic starts from zero (a "fractional order").
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import ive

from .._loops.blocks import CODE_PERIODIC
from .base import Primitive
from .cosine import ROTATION
from .statespace import StateSpace

#: Default bound on the state-space covariance error, relative to the variance.
DEFAULT_TOLERANCE = 1e-3
#: Largest order chosen automatically (state dimension 2 * MAX_ORDER + 1).
MAX_ORDER = 200


def fourier_weights(z: float, order: int) -> tuple[np.ndarray, np.ndarray]:
    """Weights ``q_j^2`` (j = 0..order) of the unit-variance series and ``dq_j^2 / dz``.

    Parameters
    ----------
    z : float
        ``scale^-2``.
    order : int
        Highest harmonic kept.

    Returns
    -------
    weights, d_weights : ndarray of shape (order + 1,)

    Notes
    -----
    ``ive(j, z) = I_j(z) e^{-z}`` and ``I_j' = (I_{j-1} + I_{j+1}) / 2``
    (Abramowitz & Stegun 1964, eq. 9.6.26) give
    ``d ive_j / dz = (ive_{j-1} + ive_{j+1}) / 2 - ive_j``; ``I_{-1} = I_1``.
    """
    j = np.arange(-1, order + 2)
    e = ive(j, z)
    mult = np.where(np.arange(order + 1) == 0, 1.0, 2.0)
    weights = mult * e[1:-1]
    d_weights = mult * (0.5 * (e[:-2] + e[2:]) - e[1:-1])
    return weights, d_weights


def tail_weight(z: float, order: int) -> tuple[float, float]:
    """``e = sum_{j > order} q_j^2`` of the unit-variance series and ``de / dz``.

    Both are summed term by term (not as ``1 - head``) to keep their digits;
    the terms fall faster than geometrically once ``j^2 > 2 z``, and summing
    stops when they drop below 1e-18 of the running total.
    """
    total, d_total, j = 0.0, 0.0, order + 1
    block = 64
    while True:
        e = ive(np.arange(j - 1, j + block + 1), z)
        terms = 2.0 * e[1:-1]
        total += float(terms.sum())
        d_total += float((e[:-2] + e[2:] - 2.0 * e[1:-1]).sum())
        if terms[-1] <= 1e-18 * max(total, 1e-300) or terms[-1] == 0.0:
            return total, d_total
        j += block


def default_order(scale: float, tolerance: float = DEFAULT_TOLERANCE) -> int:
    """Smallest order whose covariance error is at most ``tolerance`` of the variance.

    Raises
    ------
    ValueError
        If it would exceed ``MAX_ORDER`` (a very short ``scale``).
    """
    z = scale**-2.0
    tails = np.cumsum(2.0 * ive(np.arange(MAX_ORDER + 200, 0, -1), z))[::-1]
    # tails[i] = sum_{j >= i + 1} q_j^2, i.e. the error of order i
    ok = np.flatnonzero(tails[: MAX_ORDER + 1] <= tolerance)
    if ok.size == 0:
        raise ValueError(
            f"Periodic: scale={scale:.4g} needs more than {MAX_ORDER} harmonics for a "
            f"covariance error of {tolerance:g}; pass order=... explicitly, use a larger "
            "scale, or use Exact()/VFE() with the dense kernel"
        )
    return int(ok[0])


class Periodic(Primitive):
    """Periodic kernel ``amplitude^2 exp(-2 sin^2(pi tau / period) / scale^2)``.

    Parameters
    ----------
    amplitude : float or Param
        Standard deviation of the process.
    period : float or Param
        Period (time units).
    scale : float or Param
        Length scale relative to the period (dimensionless): small values give
        sharp, many-harmonic profiles.
    order : int, optional
        Harmonics kept in the state-space form (state dimension ``2 order + 1``).
        Default: chosen at every :meth:`state_space` call from the current
        ``scale`` so that :meth:`covariance_error_bound` is 1e-3 of the
        variance, with the last harmonic tapered so that the covariance is
        continuous in ``scale`` (the state size can change while fitting).
    tolerance : float, default 1e-3
        Covariance error of the automatic order, as a fraction of the variance.
        The likelihood of a long, precise series feels errors far below the
        variance: keep ``tolerance * variance`` well under the noise variance
        divided by the number of points per correlation length (on the Mauna
        Loa CO2 record 1e-3 moves the log-likelihood by about 57, 1e-8 by 1e-5).
    label : str, optional
        Prefix of the hyperparameter names in a model, default ``"periodic"``.

    Examples
    --------
    >>> k = Periodic(amplitude=1.0, period=2.0, scale=1.0)
    >>> round(float(k.value(2.0)), 12), k.order_used()
    (1.0, 4)
    >>> round(float(k.covariance_error_bound()), 12)
    0.001
    """

    param_names_local = ("amplitude", "period", "scale")
    default_label = "periodic"
    loop_code = CODE_PERIODIC  # compiled form in _loops/blocks.py (sparse methods)
    has_state_space_form = True

    def __init__(self, *, order: int | None = None, tolerance: float = DEFAULT_TOLERANCE,
                 label: str | None = None, **values):
        if order is not None and (isinstance(order, bool) or int(order) != order or order < 0):
            raise ValueError(
                f"Periodic: order must be a whole number >= 0 (harmonics kept), got {order!r}; "
                "for example order=6, or leave it out for the automatic choice"
            )
        if not 0.0 < tolerance < 1.0:
            raise ValueError(
                f"Periodic: tolerance must lie strictly between 0 and 1 (a fraction of the "
                f"variance), got {tolerance!r}; for example tolerance=1e-6"
            )
        super().__init__(label=label, **values)
        self.order = None if order is None else int(order)
        self.tolerance = float(tolerance)

    def order_used(self) -> int:
        """The order :meth:`state_space` uses at the current hyperparameters."""
        if self.order is not None:
            return self.order
        return default_order(self._params[2].value, self.tolerance)

    def covariance_error_bound(self) -> float:
        """Maximum over ``tau`` of ``|k_ss(tau) - k(tau)|`` (exact, attained at 0)."""
        amplitude, _, scale = self._values()
        weights, _ = self._weights(scale**-2.0)
        order = weights.size - 1
        tail, _ = tail_weight(scale**-2.0, order)
        full, _ = fourier_weights(scale**-2.0, order)
        # harmonics beyond the order, plus what the last kept one leaves out
        return float(amplitude**2 * (tail + (full[-1] - weights[-1])))

    def _weights(self, z: float) -> tuple[np.ndarray, np.ndarray]:
        """Kept weights and their z-derivatives: the series' own, or the tapered ones.

        With an automatic order ``J``, the last harmonic keeps only
        ``e(J - 1) - tolerance``, so the kept variance is exactly
        ``1 - tolerance`` and the kernel changes continuously when
        ``J`` steps with the scale (see the module docstring).
        """
        order = self.order_used()
        weights, d_weights = fourier_weights(z, order)
        if self.order is None and order > 0:
            tail, d_tail = tail_weight(z, order - 1)
            weights[-1] = tail - self.tolerance
            d_weights[-1] = d_tail
        return weights, d_weights

    def _value(self, tau, amplitude, period, scale):
        s = np.sin((math.pi / period) * tau)
        return amplitude**2 * np.exp(-2.0 * s * s / scale**2)

    def _grad(self, tau, amplitude, period, scale):
        phase = (math.pi / period) * tau
        s = np.sin(phase)
        k = amplitude**2 * np.exp(-2.0 * s * s / scale**2)
        z = scale**-2.0
        # d(sin^2 phase)/d log(period) = -phase sin(2 phase)
        return np.stack([2 * k, 2 * z * phase * np.sin(2 * phase) * k, 4 * z * s * s * k])

    def _state_space(self, amplitude, period, scale):
        var = amplitude**2
        z = scale**-2.0
        weights, d_weights = self._weights(z)
        order = weights.size - 1
        w = 2 * math.pi / period
        d = 2 * order + 1
        n_terms = order + 1
        diag = np.concatenate([weights[:1], np.repeat(weights[1:], 2)])
        d_diag = np.concatenate([d_weights[:1], np.repeat(d_weights[1:], 2)])
        pinf = var * np.diag(diag)
        cos_coef = np.zeros((n_terms, 1, d, d))
        sin_coef = np.zeros_like(cos_coef)
        f = np.zeros((d, d))
        cos_coef[0, 0, 0, 0] = 1.0
        for j in range(1, n_terms):
            sl = slice(2 * j - 1, 2 * j + 1)
            cos_coef[j, 0, sl, sl] = np.eye(2)
            sin_coef[j, 0, sl, sl] = ROTATION
            f[sl, sl] = j * w * ROTATION
        freq = w * np.arange(n_terms, dtype=float)
        h = np.zeros(d)
        h[0::2] = 1.0
        return StateSpace(
            F=f,
            L=np.zeros((d, 1)),
            Qc=np.zeros((1, 1)),
            H=h,
            Pinf=pinf,
            # d/dlog(scale) = dz/dlog(scale) d/dz = -2 z d/dz
            dPinf=np.stack([2 * pinf, np.zeros((d, d)), var * np.diag(-2 * z * d_diag)]),
            rate=np.zeros(n_terms),
            freq=freq,
            cos_coef=cos_coef,
            sin_coef=sin_coef,
            d_rate=np.zeros((3, n_terms)),
            d_freq=np.stack([np.zeros(n_terms), -freq, np.zeros(n_terms)]),
            d_cos_coef=np.zeros((3,) + cos_coef.shape),
            d_sin_coef=np.zeros((3,) + cos_coef.shape),
        )
