"""Transition matrices for a block of time steps at once.

The specialised Kalman loops (:mod:`longwave._loops.kalman_fast`) do not
evaluate ``A(dt)`` inside their recursion. Instead, for a block of steps they
first fill a work array, one row per matrix entry, in passes that the
compiler can vectorise (no loop-carried dependence): the step sizes, the
decays ``exp(-rate dt)`` by :func:`exp_block`, the polynomials in ``dt`` by
Horner's rule. The recursion then only reads ``A`` from those rows, so the
exponential and its call overhead stay out of its dependency chain.

Layout of the work array ``work`` (rows, block), float64, C order:

===========  ===========================================================
row          content
===========  ===========================================================
``ROW_DT``   step sizes of the block (input of the fill functions)
``ROW_E``    decays ``exp(-rate dt)`` (output of :func:`fill_decay`)
1, 3 .. 9    scratch (exponent argument, exponent bits, cos, sin, four
             Horner accumulators)
``ROW_A``    first of ``d * d`` rows: entry ``(a, c)`` of ``A`` in row
             ``ROW_A + a * d + c``
===========  ===========================================================

Callers place further matrices (a second transition, derivatives) at later
rows; :func:`n_rows` gives the total.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

ROW_DT = 0
_ROW_X = 1
ROW_E = 2
_ROW_BITS = 3
_ROW_COS = 4
_ROW_SIN = 5
_ROW_PC = 6
_ROW_PS = 7
_ROW_DPC = 8
_ROW_DPS = 9
ROW_A = 10

_LOG2E = 1.4426950408889634
_LN2_HI = 6.93147180369123816490e-01
_LN2_LO = 1.90821492927058770002e-10
_SHIFT = 6755399441055744.0  # 1.5 * 2^52: adding it rounds to an integer in the low bits
_SHIFT_BITS = 0x4338000000000000  # bit pattern of _SHIFT
_EXP_MIN = -708.0  # below this exp(x) is subnormal; returned as 0
_EXP_MAX = 709.0


def n_rows(d: int, n_matrices: int = 1) -> int:
    """Rows of a work array holding ``n_matrices`` d-by-d matrices per step."""
    return ROW_A + n_matrices * d * d


@njit(cache=True, fastmath={"contract"})
def exp_block(work, cnt):
    """``work[ROW_E, :cnt] = exp(work[1, :cnt])`` in vectorisable passes.

    Cody-Waite reduction ``x = k ln2 + r`` with ``|r| <= ln2 / 2`` and a
    degree-13 Taylor polynomial (truncation below 1e-17 relative); ``2^k`` is
    assembled from its exponent bits. Accurate to about 2 ulp over
    ``[-708, 709]``; arguments below -708 give exactly 0 (the subnormal range
    is dropped), above 709 are clamped.
    """
    x = work[_ROW_X]
    out = work[ROW_E]
    kbuf = work[_ROW_BITS]
    for b in range(cnt):
        xb = min(max(x[b], _EXP_MIN), _EXP_MAX)
        kf = xb * _LOG2E + _SHIFT
        k = kf - _SHIFT
        r = (xb - k * _LN2_HI) - k * _LN2_LO
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
        kbuf[b] = kf
        out[b] = p
    bits = kbuf.view(np.int64)
    for b in range(cnt):
        bits[b] = (bits[b] - _SHIFT_BITS + 1023) << 52
    for b in range(cnt):
        v = out[b] * kbuf[b]
        out[b] = v if x[b] >= _EXP_MIN else 0.0


@njit(cache=True)
def fill_decay(cnt, rate, work):
    """``work[ROW_E, :cnt] = exp(-rate * work[ROW_DT, :cnt])``."""
    dt = work[ROW_DT]
    x = work[_ROW_X]
    for b in range(cnt):
        x[b] = -rate * dt[b]
    exp_block(work, cnt)


@njit(cache=True)
def step_sizes(t, start, cnt, dt):
    """``dt[b] = t[start + b] - t[start + b - 1]``, with 0 for the very first time."""
    for b in range(cnt):
        i = start + b
        dt[b] = t[i] - t[i - 1] if i > 0 else 0.0


@njit(cache=True)
def _horner(coef, j, a, c, dt, acc, cnt):
    """``acc[b] = sum_k coef[j, k, a, c] dt[b]^k``; returns False if all coefficients are 0."""
    n_pow = coef.shape[1]
    nonzero = False
    for k in range(n_pow):
        if coef[j, k, a, c] != 0.0:
            nonzero = True
    if not nonzero:
        return False
    top = coef[j, n_pow - 1, a, c]
    for b in range(cnt):
        acc[b] = top
    for k in range(n_pow - 2, -1, -1):
        ck = coef[j, k, a, c]
        for b in range(cnt):
            acc[b] = acc[b] * dt[b] + ck
    return True


@njit(cache=True)
def _decay_and_rotation(rate, freq, j, work, cnt):
    """Fill decay ``exp(-rate_j dt)`` and, for rotating terms, ``cos``/``sin``."""
    dt = work[ROW_DT]
    x = work[_ROW_X]
    for b in range(cnt):
        x[b] = -rate[j] * dt[b]
    exp_block(work, cnt)
    rotating = freq[j] != 0.0
    if rotating:
        cs = work[_ROW_COS]
        sn = work[_ROW_SIN]
        for b in range(cnt):
            ph = freq[j] * dt[b]
            cs[b] = math.cos(ph)
            sn[b] = math.sin(ph)
    return rotating


@njit(cache=True)
def fill_transition(cnt, trans, work, row):
    """Write ``A(dt)`` for the steps ``work[ROW_DT, :cnt]`` into rows ``row ..``.

    ``trans = (rate, freq, cos_coef, sin_coef)`` as in
    :class:`longwave.kernels.StateSpace`; entry ``(a, c)`` goes to row
    ``row + a * d + c``.
    """
    rate, freq, cos_coef, sin_coef = trans
    n_terms, _, d, _ = cos_coef.shape
    dt = work[ROW_DT]
    e = work[ROW_E]
    cs = work[_ROW_COS]
    sn = work[_ROW_SIN]
    pc = work[_ROW_PC]
    ps = work[_ROW_PS]
    for j in range(n_terms):
        rotating = _decay_and_rotation(rate, freq, j, work, cnt)
        for a in range(d):
            for c in range(d):
                out = work[row + a * d + c]
                has_c = _horner(cos_coef, j, a, c, dt, pc, cnt)
                has_s = rotating and _horner(sin_coef, j, a, c, dt, ps, cnt)
                if j == 0:
                    for b in range(cnt):
                        out[b] = 0.0
                if has_c and has_s:
                    for b in range(cnt):
                        out[b] += e[b] * (cs[b] * pc[b] + sn[b] * ps[b])
                elif has_c and rotating:
                    for b in range(cnt):
                        out[b] += e[b] * cs[b] * pc[b]
                elif has_c:
                    for b in range(cnt):
                        out[b] += e[b] * pc[b]
                elif has_s:
                    for b in range(cnt):
                        out[b] += e[b] * sn[b] * ps[b]


@njit(cache=True)
def fill_transition_grad(cnt, trans, dtrans, q, work, row):
    """Write the derivative of ``A(dt)`` w.r.t. parameter ``q`` into rows ``row ..``.

    By the product rule on each term (see ``StateSpace.transition_grad``):
    ``exp(-r dt) [-dr dt (c P + s S) + (c dP + s dS) + df dt (c S - s P)]``.
    """
    rate, freq, cos_coef, sin_coef = trans
    d_rate, d_freq, d_cos, d_sin = dtrans
    n_terms, _, d, _ = cos_coef.shape
    dt = work[ROW_DT]
    e = work[ROW_E]
    cs = work[_ROW_COS]
    sn = work[_ROW_SIN]
    pc = work[_ROW_PC]
    ps = work[_ROW_PS]
    dpc = work[_ROW_DPC]
    dps = work[_ROW_DPS]
    for j in range(n_terms):
        rotating = _decay_and_rotation(rate, freq, j, work, cnt)
        dr = d_rate[q, j]
        df = d_freq[q, j]
        for a in range(d):
            for c in range(d):
                out = work[row + a * d + c]
                if j == 0:
                    for b in range(cnt):
                        out[b] = 0.0
                if not _horner(cos_coef, j, a, c, dt, pc, cnt):
                    for b in range(cnt):
                        pc[b] = 0.0
                if not _horner(d_cos[q], j, a, c, dt, dpc, cnt):
                    for b in range(cnt):
                        dpc[b] = 0.0
                if not rotating:
                    for b in range(cnt):
                        out[b] += e[b] * (dpc[b] - dr * dt[b] * pc[b])
                    continue
                if not _horner(sin_coef, j, a, c, dt, ps, cnt):
                    for b in range(cnt):
                        ps[b] = 0.0
                if not _horner(d_sin[q], j, a, c, dt, dps, cnt):
                    for b in range(cnt):
                        dps[b] = 0.0
                for b in range(cnt):
                    cb = cs[b]
                    sb = sn[b]
                    out[b] += e[b] * (
                        -dr * dt[b] * (cb * pc[b] + sb * ps[b])
                        + (cb * dpc[b] + sb * dps[b])
                        + df * dt[b] * (cb * ps[b] - sb * pc[b])
                    )
