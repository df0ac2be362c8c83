"""Cosine kernel: a sinusoid of random phase and amplitude.

Dense form (Rasmussen & Williams 2006, eq. 4.22 for the one-frequency case)::

    k(tau) = amplitude^2 cos(2 pi tau / period)

State-space form (exact): the state ``x = (f, g)`` rotates at the angular
frequency ``w = 2 pi / period`` with no driving noise::

    F = [[0, -w], [w, 0]],   A(dt) = cos(w dt) I + sin(w dt) [[0, -1], [1, 0]],
    Pinf = amplitude^2 I,    H = (1, 0),

so ``H A(tau) Pinf H^T = amplitude^2 cos(w tau)`` and ``Q(dt) = 0``. Alone it
is a degenerate (rank-2) process; multiplied by a Matérn kernel it becomes a
damped, noise-driven oscillation (Solin & Särkkä 2014, sec. 3).
"""

from __future__ import annotations

import math

import numpy as np

from .._loops.blocks import CODE_COSINE
from .base import Primitive
from .statespace import StateSpace

#: The generator of plane rotations, ``[[0, -1], [1, 0]]``.
ROTATION = np.array([[0.0, -1.0], [1.0, 0.0]])


class Cosine(Primitive):
    """Cosine kernel ``k(tau) = amplitude^2 cos(2 pi tau / period)``.

    Parameters
    ----------
    amplitude : float or Param
        Standard deviation of the sinusoid.
    period : float or Param
        Period (time units).
    label : str, optional
        Prefix of the hyperparameter names in a model, default ``"cosine"``.

    Examples
    --------
    >>> k = Cosine(amplitude=2.0, period=4.0)
    >>> [round(float(v), 12) for v in k.value([0.0, 1.0, 2.0])]
    [4.0, 0.0, -4.0]
    """

    param_names_local = ("amplitude", "period")
    loop_code = CODE_COSINE  # compiled form in _loops/blocks.py (sparse methods)
    default_label = "cosine"
    has_state_space_form = True

    def _value(self, tau, amplitude, period):
        return amplitude**2 * np.cos((2 * math.pi / period) * tau)

    def _grad(self, tau, amplitude, period):
        phase = (2 * math.pi / period) * tau
        var = amplitude**2
        # d phase / d log(period) = -phase
        return np.stack([2 * var * np.cos(phase), var * phase * np.sin(phase)])

    def _state_space(self, amplitude, period):
        w = 2 * math.pi / period
        var = amplitude**2
        pinf = var * np.eye(2)
        cos_coef = np.eye(2)[None, None]
        sin_coef = ROTATION[None, None].copy()
        return StateSpace(
            F=w * ROTATION,
            L=np.zeros((2, 1)),
            Qc=np.zeros((1, 1)),
            H=np.array([1.0, 0.0]),
            Pinf=pinf,
            dPinf=np.stack([2 * pinf, np.zeros((2, 2))]),
            rate=np.zeros(1),
            freq=np.array([w]),
            cos_coef=cos_coef,
            sin_coef=sin_coef,
            d_rate=np.zeros((2, 1)),
            d_freq=np.array([[0.0], [-w]]),
            d_cos_coef=np.zeros((2, 1, 1, 2, 2)),
            d_sin_coef=np.zeros((2, 1, 1, 2, 2)),
        )
