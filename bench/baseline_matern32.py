"""Hand-tuned baseline: a Matérn-3/2 Kalman filter written for this one kernel.

The reference point of ``bench_kalman.py``: how fast a log marginal likelihood
pass can be when everything is fixed in advance, to judge what the general
engine loses. Written directly from the model (``d = 2``, ``lam = sqrt(3) /
scale``, ``A(dt) = exp(-lam dt) [[1 + lam dt, dt], [-lam^2 dt, 1 - lam dt]]``,
``Pinf = amplitude^2 diag(1, lam^2)``), with the usual tricks:

- the decays ``exp(-lam dt)`` of a block of steps are computed in a separate,
  vectorisable pass (a polynomial exponential), outside the recursion;
- the state covariance is carried as ``M = P - Pinf``, so the prediction is
  ``M <- A M A^T`` and nothing is added on the critical path;
- one division per step; the first row of ``P`` is updated as ``P_0b r / s``;
- the log-determinant is a running product of the innovation variances,
  flushed through ``log`` when it leaves ``[1e-100, 1e100]``;
- every state quantity is a scalar local (the state dimension is fixed).

It knows nothing of the library and is not used by it.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

BLOCK = 512
_LOG2E = 1.4426950408889634
_LN2_HI = 6.93147180369123816490e-01
_LN2_LO = 1.90821492927058770002e-10
_SHIFT = 6755399441055744.0  # 1.5 * 2^52
_SHIFT_BITS = 0x4338000000000000


@njit(cache=True, fastmath={"contract"})
def _decays(t, start, cnt, lam, dt, decay, bits):
    """``dt`` and ``exp(-lam dt)`` for the steps ``start .. start + cnt``."""
    for b in range(cnt):
        i = start + b
        dt[b] = t[i] - t[i - 1] if i > 0 else 0.0
    for b in range(cnt):
        x = max(-lam * dt[b], -708.0)
        kf = x * _LOG2E + _SHIFT
        k = kf - _SHIFT
        r = (x - k * _LN2_HI) - k * _LN2_LO
        p = 1.0 / 6227020800.0
        p = p * r + 1.0 / 479001600.0
        p = p * r + 1.0 / 39916800.0
        p = p * r + 1.0 / 3628800.0
        p = p * r + 1.0 / 362880.0
        p = p * r + 1.0 / 40320.0
        p = p * r + 1.0 / 5040.0
        p = p * r + 1.0 / 720.0
        p = p * r + 1.0 / 120.0
        p = p * r + 1.0 / 24.0
        p = p * r + 1.0 / 6.0
        p = p * r + 0.5
        p = p * r + 1.0
        p = p * r + 1.0
        bits[b] = kf
        decay[b] = p
    ibits = bits.view(np.int64)
    for b in range(cnt):
        ibits[b] = (ibits[b] - _SHIFT_BITS + 1023) << 52
    for b in range(cnt):
        decay[b] = decay[b] * bits[b] if -lam * dt[b] >= -708.0 else 0.0


@njit(cache=True)
def matern32_loglik(t, y, err, mean, excess, amplitude, scale, work):
    """Log marginal likelihood of ``y = mean + f + noise``, ``f`` Matérn-3/2.

    ``excess`` is the excess noise *variance*; ``work`` is a (3, BLOCK) scratch array.
    """
    lam = math.sqrt(3.0) / scale
    p00 = amplitude * amplitude
    n = t.size
    dt = work[0]
    decay = work[1]
    bits = work[2]
    m0 = 0.0
    m1 = 0.0
    M00 = 0.0
    M01 = 0.0
    M11 = 0.0
    logsum = 0.0
    prod = 1.0
    quad = 0.0
    for start in range(0, n, BLOCK):
        cnt = min(BLOCK, n - start)
        _decays(t, start, cnt, lam, dt, decay, bits)
        for b in range(cnt):
            i = start + b
            h = dt[b]
            if h > 0.0:
                e = decay[b]
                lh = lam * h
                a00 = e * (1.0 + lh)
                a01 = e * h
                a10 = -e * lam * lh
                a11 = e * (1.0 - lh)
                w00 = a00 * M00 + a01 * M01
                w01 = a00 * M01 + a01 * M11
                w10 = a10 * M00 + a11 * M01
                w11 = a10 * M01 + a11 * M11
                M00 = w00 * a00 + w01 * a01
                M01 = w00 * a10 + w01 * a11
                M11 = w10 * a10 + w11 * a11
                x0 = a00 * m0 + a01 * m1
                m1 = a10 * m0 + a11 * m1
                m0 = x0
            ei = err[i]
            r = ei * ei + excess
            P00 = M00 + p00
            s = P00 + r
            v = y[i] - mean - m0
            inv = 1.0 / s
            pn = prod * s
            if 1e-100 < pn < 1e100:
                prod = pn
            else:
                logsum += math.log(prod) + math.log(s)
                prod = 1.0
            quad += v * v * inv
            g = v * inv
            m0 += P00 * g
            m1 += M01 * g
            M11 -= M01 * inv * M01
            M01 = M01 * r * inv
            M00 = P00 * r * inv - p00
    logsum += math.log(prod)
    return -0.5 * (logsum + quad + n * math.log(2.0 * math.pi))


def new_work():
    return np.empty((3, BLOCK))
